"""The optional sections of run_analysis: each equals the engine call it wraps, runs only when
named, and round-trips through a recipe. The estimators themselves are checked against outside
sources in test_competing, test_parametric, test_sample_size and test_landmark; here the wiring."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy.stats import norm

from engine.analysis.recipe import Recipe, make_recipe
from engine.analysis.run import ANALYSIS_DEFAULTS, resolved_settings, run_analysis
from engine.competing.incidence import cause_specific_cox, cumulative_incidence
from engine.io.tables import read_table
from engine.parametric.fits import fit_parametric
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles
from engine.survival.landmark import landmark
from engine.survival.summary import curves_json

DAIRY = Path(__file__).resolve().parents[2] / "demo_data" / "dairy_herd.csv"
ROLES = Roles(
    time="weeks",
    unit="weeks",
    event="status",
    event_causes=(("died", "died"), ("sold", "sold")),
    group="housing",
    covariates=("first_calving_age_months",),
)
EXTRAS = {
    "competing": {"times": [52.0]},
    "parametric": {"times": [52.0], "horizon": 400.0},
    "sample_size": {"events": 150},
    "landmark": {"time": 20.0},
}


@pytest.fixture(scope="module")
def dairy():
    table = read_table(DAIRY)
    prepared = prepare(table.frame, ROLES)
    return table, prepared, run_analysis(prepared, EXTRAS)


def test_optional_sections_run_only_when_named(dairy):
    _, prepared, _ = dairy
    plain = run_analysis(prepared, {})
    assert set(plain) == {"data", "curves", "comparison", "cox"}
    assert set(resolved_settings({"landmark": {"time": 3}})) == {
        "curves", "comparison", "cox", "landmark"
    }  # fmt: skip


def test_sections_are_json_ready(dairy):
    json.dumps(dairy[2], allow_nan=False)


def test_competing_section_equals_the_engine(dairy):
    _, prepared, sections = dairy
    section = sections["competing"]
    result = cumulative_incidence(prepared.frame, by_group=True)
    assert section["causes"] == ["died", "sold"] and section["warning"] == result.warning
    last = result.to_frame().groupby(["group", "cause"], sort=False).tail(1)
    assert_allclose([r["cumulative_incidence"] for r in section["at_end"]],
                    last["cumulative_incidence"])  # fmt: skip
    at = result.at([52.0])
    assert_allclose([r["cumulative_incidence"] for r in section["at_times"]],
                    at["cumulative_incidence"])  # fmt: skip
    models = cause_specific_cox(prepared.frame, ["first_calving_age_months"])
    for entry, (cause, model) in zip(section["cause_specific_cox"], models.models, strict=True):
        assert entry["cause"] == cause and entry["events"] == model.events
        assert_allclose(entry["terms"][0]["hazard_ratio"], model.terms[0].hazard_ratio)


def test_cumulative_incidence_plus_survival_from_any_cause_is_one(dairy):
    # exact property of the Aalen–Johansen estimator: sum of CIFs = 1 - KM(any cause)
    _, prepared, _ = dairy
    frame = prepared.frame
    result = cumulative_incidence(frame, by_group=False).to_frame()
    totals = result.groupby("time")["cumulative_incidence"].sum()
    any_event = frame.assign(_event=frame["_cause"].notna().astype(int)).drop(columns="_group")
    km = curves_json(any_event, times=list(totals.index[-3:]))[0]["at_times"]
    assert_allclose(totals.iloc[-3:].to_numpy(), [1 - p["survival"] for p in km], atol=1e-12)


def test_parametric_section_equals_the_engine(dairy):
    _, prepared, sections = dairy
    section = sections["parametric"]
    result = fit_parametric(prepared.frame, times=[52.0], horizon=400.0)
    assert_allclose([r["aic"] for r in section["aic_table"]], result.aic_table["aic"])
    assert [r["quantity"] for r in section["estimates"]] == list(result.estimates["quantity"])
    # exponential MLE: rate = events / total time at risk (closed form)
    frame = prepared.frame
    rate = frame["_event"].sum() / frame["_time"].sum()
    median = next(
        r for r in section["estimates"]
        if r["distribution"] == "exponential" and r["quantity"] == "median"
    )  # fmt: skip
    assert_allclose(median["estimate"], math.log(2) / rate, rtol=1e-9)
    assert median["extrapolated"] is True  # past 259.3 weeks of follow-up
    assert section["aft"]["distribution"] == "weibull"


def test_sample_size_section_gives_schoenfelds_events_by_hand(dairy):
    section = dairy[2]["sample_size"]
    by_hand = (norm.ppf(0.975) + norm.ppf(0.8)) ** 2 * 4 / math.log(0.7) ** 2  # Schoenfeld 1983
    schoenfeld = next(r for r in section["needed"] if r["method"] == "schoenfeld")
    assert_allclose(schoenfeld["events_exact"], by_hand)
    assert schoenfeld["events"] == math.ceil(by_hand) == 247
    power = next(r for r in section["power"] if r["method"] == "schoenfeld")["power"]
    assert_allclose(power, norm.cdf(math.sqrt(150 * math.log(0.7) ** 2 / 4) - norm.ppf(0.975)))


def test_landmark_section_counts_and_curves(dairy):
    _, prepared, sections = dairy
    section = sections["landmark"]
    selected = landmark(prepared.frame, 20.0)
    assert section["n_kept"] == selected.n_kept == int((prepared.frame["_time"] > 20).sum())
    assert section["n_excluded"] == len(prepared.frame) - selected.n_kept
    assert section["curves"] == curves_json(selected.frame)
    assert section["comparison"]["df"] == 1


def test_landmark_without_a_time_is_a_clear_reason_in_its_section(dairy):
    sections = run_analysis(dairy[1], {"landmark": {}})
    assert "needs a landmark time" in sections["landmark"]["not_computed"]
    assert sections["curves"][0]["n"] == len(dairy[1].frame)  # the rest is still there


def test_recipe_keeps_the_optional_analyses_and_their_defaults(dairy):
    table, _, _ = dairy
    recipe = make_recipe(table, ROLES, {"curves": {}, **EXTRAS})
    again = Recipe.from_json(recipe.to_json())
    settings = again.settings()
    assert settings["landmark"] == {**ANALYSIS_DEFAULTS["landmark"], "time": 20.0}
    assert settings["sample_size"]["hazard_ratio"] == 0.7
    assert Roles.from_dict(again.roles).event_causes == ROLES.event_causes


def test_delayed_entry_changes_the_risk_sets_as_expected():
    # Two subjects enter late: before their entry they are not at risk, so the first event's
    # risk set is smaller and the survival drop larger (exact by hand: 1 - 1/3 vs 1 - 1/5).
    frame = pd.DataFrame(
        {"t": [2.0, 5.0, 6.0, 7.0, 8.0], "e": [1, 1, 0, 1, 0], "entry": [0.0, 0.0, 0.0, 3.0, 4.0]}
    )
    plain = prepare(frame, Roles(time="t", event="e"))
    late = prepare(frame, Roles(time="t", event="e", entry="entry"))
    first_plain = curves_json(plain.frame, times=[2.0])[0]["at_times"][0]
    first_late = curves_json(late.frame, times=[2.0])[0]["at_times"][0]
    assert first_plain["at_risk"] == 5 and first_late["at_risk"] == 3
    assert_allclose(first_plain["survival"], 1 - 1 / 5)
    assert_allclose(first_late["survival"], 1 - 1 / 3)
    np.testing.assert_equal(late.frame["_entry"].to_numpy(), frame["entry"].to_numpy())
