"""run_analysis with the page choices a recipe keeps: the comparison's groups cut from a numeric
column and its strata, the model's covariate subset, strata and reference levels.

Checked against statsmodels (test-only reference library): ``survdiff`` for the stratified
log-rank test and ``PHReg`` (Efron ties, strata) for the Cox model; and against the engine called
directly, so the settings reach the same functions the pages call.
"""

from __future__ import annotations

import re
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from statsmodels.duration.hazard_regression import PHReg
from statsmodels.duration.survfunc import survdiff

from engine.analysis.recipe import Recipe, make_recipe
from engine.analysis.run import ANALYSIS_DEFAULTS, run_analysis
from engine.cox.fit import fit_cox
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.columns import cut_at_quantiles
from engine.prepare.roles import Roles
from engine.survival.compare import compare_frame
from engine.survival.summary import COMPARISON_KEYS

PUMPS = Path(__file__).resolve().parents[2] / "demo_data" / "pump_bearings.csv"
ROLES = Roles(
    time="months_in_service",
    unit="months",
    event="failed",
    group="supplier",
    covariates=("load_kN", "temperature_C", "lubricant"),
    categorical=("lubricant",),
)
CHOICES = {
    "comparison": {"cut": {"column": "temperature_C", "groups": 3}, "strata": "site"},
    "cox": {
        "covariates": ["load_kN", "lubricant"],
        "strata": "site",
        "reference": [["lubricant", "oil bath"]],
    },
}


@pytest.fixture(scope="module")
def table():
    return read_table(PUMPS)


@pytest.fixture(scope="module")
def prepared(table):
    return prepare(table.frame, ROLES)


def test_defaults_keep_the_roles_choices():
    assert ANALYSIS_DEFAULTS["comparison"]["cut"] is None
    assert ANALYSIS_DEFAULTS["comparison"]["strata"] is None
    assert {k: ANALYSIS_DEFAULTS["cox"][k] for k in ("covariates", "strata", "reference")} == {
        "covariates": None,
        "strata": None,
        "reference": None,
    }


def test_cut_and_strata_comparison_matches_statsmodels_and_the_engine(table, prepared):
    got = run_analysis(prepared, CHOICES, table.frame)["comparison"]
    raw = table.frame.loc[prepared.frame.index]
    groups = cut_at_quantiles(raw["temperature_C"], 3, "temperature_C")
    direct = compare_frame(
        prepared.frame[["_time", "_event"]].assign(
            _group=groups, _strata=raw["site"].astype("category")
        )
    ).to_dict()
    assert got == {k: direct[k] for k in COMPARISON_KEYS}
    assert got["df"] == 2  # three groups
    keep = groups.notna() & raw["site"].notna()
    chi2, p_value = survdiff(
        prepared.frame["_time"][keep].to_numpy(),
        prepared.frame["_event"][keep].to_numpy(),
        np.asarray(groups[keep].cat.codes),
        strata=np.asarray(raw["site"][keep]),
    )
    assert got["statistic"] == pytest.approx(chi2, rel=1e-8)
    assert got["p_value"] == pytest.approx(p_value, rel=1e-6)
    # each choice changes the numbers: without the strata, or with the group role, another test
    cut_only = {"comparison": {"cut": CHOICES["comparison"]["cut"]}}
    unstratified = run_analysis(prepared, cut_only, table.frame)["comparison"]
    assert unstratified["statistic"] != pytest.approx(got["statistic"], rel=1e-3)
    assert run_analysis(prepared)["comparison"]["df"] == prepared.frame["_group"].nunique() - 1


def test_model_subset_strata_and_reference_match_statsmodels(table, prepared):
    cox = run_analysis(prepared, CHOICES, table.frame)["cox"]
    assert {t["variable"] for t in cox["terms"]} == {"load_kN", "lubricant"}
    assert {t["reference"] for t in cox["terms"] if t["variable"] == "lubricant"} == {"oil bath"}
    raw = table.frame.loc[prepared.frame.index]
    design = pd.DataFrame({"load_kN": prepared.frame["load_kN"]})
    levels = [str(x) for x in prepared.frame["lubricant"].cat.categories if str(x) != "oil bath"]
    for level in levels:
        design[level] = (prepared.frame["lubricant"].astype(str) == level).astype(float)
    complete = design["load_kN"].notna() & prepared.frame["lubricant"].notna()
    fit = PHReg(
        prepared.frame["_time"][complete].to_numpy(),
        design[complete].to_numpy(),
        status=prepared.frame["_event"][complete].to_numpy(),
        strata=np.asarray(raw["site"][complete]),
        ties="efron",
    ).fit()
    expected = dict(zip(["load_kN", *levels], fit.params, strict=True))
    for term in cox["terms"]:
        name = term["variable"] if term["level"] is None else term["level"]
        assert term["coef"] == pytest.approx(expected[name], abs=1e-6)
    assert cox["n"] == int(complete.sum())
    # and the engine fitted directly with the same choices
    direct = fit_cox(
        prepared.frame.assign(_s=raw["site"].to_numpy()),
        ["load_kN", "lubricant"],
        categorical=["lubricant"],
        reference={"lubricant": "oil bath"},
        strata="_s",
    )
    assert [t["coef"] for t in cox["terms"]] == pytest.approx(
        [t.coef for t in direct.terms], abs=1e-12
    )


def test_strata_none_is_the_role_and_false_is_no_stratification(table):
    with_role = prepare(table.frame, replace(ROLES, strata="site"))
    default = run_analysis(with_role, None, table.frame)
    named = {"comparison": {"strata": "site"}, "cox": {"strata": "site"}}
    explicit = run_analysis(with_role, named, table.frame)
    assert default["comparison"]["statistic"] == pytest.approx(
        explicit["comparison"]["statistic"], rel=1e-12
    )
    assert [t["coef"] for t in default["cox"]["terms"]] == pytest.approx(
        [t["coef"] for t in explicit["cox"]["terms"]], abs=1e-9
    )
    off = {"comparison": {"strata": False}, "cox": {"strata": False}}
    unstratified = run_analysis(with_role, off, table.frame)
    plain = run_analysis(prepare(table.frame, ROLES))
    assert unstratified["comparison"] == plain["comparison"]
    assert unstratified["cox"]["terms"] == plain["cox"]["terms"]
    assert unstratified["comparison"]["statistic"] != pytest.approx(
        default["comparison"]["statistic"], rel=1e-6
    )


def test_a_cut_runs_the_comparison_without_a_group_role(table):
    prepared = prepare(table.frame, replace(ROLES, group=None))
    assert run_analysis(prepared)["comparison"] is None
    cut = {"comparison": {"cut": {"column": "load_kN", "groups": 2}}}
    assert run_analysis(prepared, cut, table.frame)["comparison"]["df"] == 1


def test_an_empty_covariate_subset_fits_no_model(table, prepared):
    assert run_analysis(prepared, {"cox": {"covariates": []}}, table.frame)["cox"] is None


def test_unknown_columns_are_named_in_the_section_they_stop(table, prepared):
    cut = {"comparison": {"cut": {"column": "nowhere", "groups": 2}}}
    sections = run_analysis(prepared, cut, table.frame)
    assert "'nowhere'" in sections["comparison"]["not_computed"]
    assert sections["cox"]["terms"]  # the other sections are still computed
    sections = run_analysis(prepared, {"cox": {"covariates": ["site"]}}, table.frame)
    assert re.search(r"'site'.*not among the covariates", sections["cox"]["not_computed"])
    assert sections["comparison"]["statistic"] > 0


def test_a_recipe_without_the_new_keys_replays_as_before(table, prepared):
    old = make_recipe(
        table, ROLES, {"curves": {}, "comparison": {"test": "logrank"}, "cox": {"ties": "efron"}}
    ).to_dict()
    assert "cut" not in old["analyses"]["comparison"] and "covariates" not in old["analyses"]["cox"]
    settings = Recipe.from_dict(old).settings()
    assert settings["comparison"]["cut"] is None and settings["cox"]["strata"] is None
    assert run_analysis(prepared, settings, table.frame) == run_analysis(prepared)


def test_choices_survive_the_recipe_json(table, prepared):
    recipe = make_recipe(table, ROLES, {"curves": {}, **CHOICES})
    again = Recipe.from_json(recipe.to_json())
    assert again.analyses == recipe.analyses
    first = run_analysis(prepared, recipe.settings(), table.frame)
    assert run_analysis(prepared, again.settings(), table.frame) == first
