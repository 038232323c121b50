"""Aalen–Johansen cumulative incidence against lifelines and exact properties."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import AalenJohansenFitter, KaplanMeierFitter
from numpy.testing import assert_allclose

from engine.competing.incidence import aalen_johansen, cumulative_incidence
from engine.errors import AnalysisError


def _competing_sample(rng, n=400, continuous=True):
    """Two latent causes and independent censoring; no ties when ``continuous``."""
    t1 = rng.exponential(10.0, n)
    t2 = rng.weibull(1.5, n) * 14.0
    cens = rng.uniform(2.0, 30.0, n)
    time = np.minimum.reduce([t1, t2, cens])
    code = np.select([time == t1, time == t2], [1, 2], 0)
    if not continuous:
        time = np.ceil(time)
    cause = np.where(code == 1, "relapse", np.where(code == 2, "death", None))
    return time, code, cause


def _lifelines_aj(time, code, event_of_interest, entry=None):
    fitter = AalenJohansenFitter(calculate_variance=True)
    return fitter.fit(time, code, event_of_interest=event_of_interest, entry=entry)


@pytest.mark.parametrize("cause_name, code", [("relapse", 1), ("death", 2)])
def test_matches_lifelines_aalen_johansen_without_ties(rng, cause_name, code):
    # Continuous simulated times have no ties, so lifelines does not jitter (it only jitters
    # tied times of different causes) and both estimates are on exactly the same data.
    time, codes, cause = _competing_sample(rng)
    assert len(np.unique(time)) == len(time)
    ours = aalen_johansen(time, cause).table
    ours = ours[ours.cause == cause_name].reset_index(drop=True)
    ref = _lifelines_aj(time, codes, code)
    assert_allclose(ours["time"], ref.cumulative_density_.index.to_numpy())
    assert_allclose(ours["cumulative_incidence"], ref.cumulative_density_.iloc[:, 0], atol=1e-13)
    ref_var = ref.variance_.to_numpy()
    # lifelines' variance is NaN (0 * inf) where the last subject at risk has an event; ours
    # drops that zero-weight term. Compare everywhere lifelines has a number.
    finite = np.isfinite(ref_var)
    assert finite.sum() >= len(ref_var) - 1
    assert_allclose(ours["std_error"].to_numpy()[finite] ** 2, ref_var[finite], atol=1e-13)
    # lifelines 0.30 labels its bounds the other way round ("upper" holds the smaller value);
    # compare values by position: first column = lower bound.
    ref_ci = ref.confidence_interval_.to_numpy()
    ref_lower, ref_upper = np.minimum(ref_ci[:, 0], ref_ci[:, 1]), np.maximum(*ref_ci.T)
    positive = (ours["cumulative_incidence"].to_numpy() > 0) & finite
    assert_allclose(ours["lower"].to_numpy()[positive], ref_lower[positive], rtol=1e-9)
    assert_allclose(ours["upper"].to_numpy()[positive], ref_upper[positive], rtol=1e-9)


def test_matches_lifelines_with_delayed_entry(rng):
    time, codes, cause = _competing_sample(rng, n=300)
    entry = time * rng.uniform(0.0, 0.6, len(time))  # continuous: never equal to an event time
    ours = aalen_johansen(time, cause, entry=entry).table
    ours = ours[(ours.cause == "relapse") & (ours.time > 0)]  # lifelines has no row at 0 here
    ref = _lifelines_aj(time, codes, 1, entry=entry)
    ref_cif = ref.cumulative_density_.iloc[:, 0].reindex(ours["time"].to_numpy())
    assert_allclose(ours["cumulative_incidence"], ref_cif.to_numpy(), atol=1e-13)
    ref_at_risk = ref.event_table["at_risk"].reindex(ours["time"].to_numpy())
    observed = ours["n_events_any"].to_numpy() + ours["n_censored"].to_numpy() > 0
    assert_allclose(ours["n_at_risk"].to_numpy()[observed], ref_at_risk.to_numpy()[observed])


@settings(max_examples=60, deadline=None)
@given(
    data=st.lists(
        st.tuples(st.integers(1, 12), st.sampled_from([None, "a", "b", "c"])),
        min_size=1,
        max_size=40,
    )
)
def test_single_cause_equals_one_minus_kaplan_meier(data):
    # Exact identity: with one cause, sum S(t_i-) d_i / n_i telescopes to 1 - S(t). Ties allowed.
    time = np.array([t for t, _ in data], dtype=float)
    cause = np.array(["x" if c is not None else None for _, c in data], dtype=object)
    if all(c is None for c in cause):
        return
    table = aalen_johansen(time, cause).table
    km = KaplanMeierFitter().fit(time, event_observed=np.array([c is not None for c in cause]))
    km_at = km.survival_function_at_times(table["time"].to_numpy()).to_numpy()
    assert_allclose(table["cumulative_incidence"], 1.0 - km_at, atol=1e-12)
    assert_allclose(table["cumulative_incidence"], table["one_minus_km"], atol=1e-12)


@settings(max_examples=60, deadline=None)
@given(
    data=st.lists(
        st.tuples(st.integers(0, 12), st.sampled_from([None, "a", "b", "c"])),
        min_size=1,
        max_size=40,
    )
)
def test_incidences_and_overall_survival_sum_to_one(data):
    # Exact property: every subject is event-free or has had exactly one cause, so
    # sum_j F_j(t) + S(t) = 1 at every t (S = Kaplan–Meier for any cause). Ties allowed.
    time = np.array([t for t, _ in data], dtype=float)
    cause = np.array([c for _, c in data], dtype=object)
    if all(c is None for c in cause):
        return
    table = aalen_johansen(time, cause).table
    total = table.groupby("time")["cumulative_incidence"].sum()
    km = KaplanMeierFitter().fit(time, event_observed=np.array([c is not None for c in cause]))
    surv = km.survival_function_at_times(total.index.to_numpy()).to_numpy()
    assert_allclose(total.to_numpy() + surv, 1.0, atol=1e-12)


def test_one_minus_km_overstates_and_warning(rng):
    time, _, cause = _competing_sample(rng)
    result = aalen_johansen(time, cause)
    table = result.table
    assert (table["one_minus_km"] >= table["cumulative_incidence"] - 1e-12).all()
    assert result.warning is not None and "overstates" in result.warning
    single = aalen_johansen(time, np.where(cause == "relapse", "relapse", None))
    assert single.warning is None


def test_by_group_equals_separate_fits(rng):
    time, _, cause = _competing_sample(rng, n=300, continuous=False)
    group = pd.Categorical(rng.choice(["B", "A", "C"], len(time)), categories=["B", "A", "C"])
    split = aalen_johansen(time, cause, group=group)
    assert split.groups == ("B", "A", "C")
    for level in ("B", "A", "C"):
        mask = np.asarray(group == level)
        alone = aalen_johansen(time[mask], cause[mask]).table
        mine = split.table[split.table.group == level].drop(columns="group")
        pd.testing.assert_frame_equal(
            mine.reset_index(drop=True), alone.drop(columns="group").reset_index(drop=True)
        )


def test_small_hand_example():
    # Times 1..5: a at 1, b at 2, censored at 3, a at 4, b at 5 (n = 5).
    # F_a(1) = 1/5; S(1) = 4/5; F_b(2) = 4/5 * 1/4 = 1/5; S(2) = 3/5; censor at 3: S = 3/5;
    # F_a(4) = 1/5 + 3/5 * 1/2 = 1/2; S(4) = 3/10; F_b(5) = 1/5 + 3/10 = 1/2.
    result = aalen_johansen([1, 2, 3, 4, 5], ["a", "b", None, "a", "b"])
    at = result.at([0.5, 1, 2.5, 4, 10]).set_index(["cause", "time"])["cumulative_incidence"]
    assert_allclose(at["a"].to_numpy(), [0, 0.2, 0.2, 0.5, 0.5])
    assert_allclose(at["b"].to_numpy(), [0, 0, 0.2, 0.2, 0.5])


def test_prepared_frame_and_json(rng):
    time, _, cause = _competing_sample(rng, n=100)
    frame = pd.DataFrame(
        {
            "_time": time,
            "_event": (cause == "relapse").astype(int),
            "_cause": cause,
            "_group": pd.Categorical(rng.choice(["x", "y"], len(time))),
        }
    )
    result = cumulative_incidence(frame)
    assert set(result.table["group"]) == {"x", "y"}
    overall = cumulative_incidence(frame, by_group=False)
    assert overall.table["group"].isna().all()
    text = json.dumps(result.to_dict(), allow_nan=False)
    assert "relapse" in text
    # Without causes the event column is the single cause.
    one = cumulative_incidence(frame.drop(columns="_cause"), by_group=False)
    assert one.causes == ("event",)


@pytest.mark.parametrize(
    "time, cause, entry, match",
    [
        ([1.0, -2.0], ["a", None], None, "times must be finite"),
        ([1.0, 2.0], [None, None], None, "no events"),
        ([1.0, 2.0], ["a", None], [1.0, 0.5], "Entry times must be earlier"),
    ],
)
def test_bad_input_raises_clear_error(time, cause, entry, match):
    with pytest.raises(AnalysisError, match=match):
        aalen_johansen(time, cause, entry=entry)


def test_cause_specific_cox_matches_lifelines_with_other_causes_censored(rng):
    # Reference: lifelines CoxPHFitter (Efron ties) on the event indicator of one cause.
    from lifelines import CoxPHFitter

    from engine.competing.incidence import cause_specific_cox

    n = 400
    age = rng.normal(60, 8, n)
    t1 = rng.exponential(10 * np.exp(-0.03 * (age - 60)))
    t2 = rng.exponential(12 * np.exp(0.02 * (age - 60)))
    cens = rng.uniform(2, 30, n)
    time = np.round(np.minimum.reduce([t1, t2, cens]), 1)  # ties on purpose
    cause = np.where(time == np.round(t1, 1), "relapse", None)
    cause = np.where((cause == None) & (time == np.round(t2, 1)), "death", cause)  # noqa: E711
    frame = pd.DataFrame(
        {"_time": time, "_event": (cause != None).astype(int), "_cause": cause, "age": age}  # noqa: E711
    )
    result = cause_specific_cox(frame, ["age"])
    assert result.causes == ("death", "relapse")
    for name in ("death", "relapse"):
        ref = CoxPHFitter().fit(
            pd.DataFrame({"t": time, "e": (cause == name).astype(int), "age": age}), "t", "e"
        )
        term = result.model(name).terms[0]
        assert_allclose(term.coef, ref.params_["age"], rtol=1e-6)
        assert_allclose(term.se, ref.standard_errors_["age"], rtol=1e-5)
    frame_out = result.to_frame()
    assert set(frame_out["cause"]) == {"death", "relapse"}
    json.dumps(result.to_dict(), allow_nan=False)


def test_bounds_stay_finite_when_every_subject_has_one_cause():
    result = aalen_johansen([1.0, 2.0, 3.0], ["a", "a", "a"])
    table = result.table
    assert np.isfinite(table[["lower", "upper", "std_error"]].to_numpy()).all()
    assert table["cumulative_incidence"].iloc[-1] == 1.0
    assert (table["lower"] <= table["cumulative_incidence"]).all()
    assert (table["cumulative_incidence"] <= table["upper"]).all()


def test_rows_without_a_group_are_in_no_group(rng):
    """As for the curves: a row without a group counts in the overall estimate only; each
    group's estimate is that of its own rows (it used to be an error)."""
    time, _, cause = _competing_sample(rng, n=200)
    group = pd.Categorical(rng.choice(["a", "b"], 200).astype(object))
    group[:15] = np.nan
    frame = pd.DataFrame({"_time": time, "_cause": cause, "_group": group})
    split = cumulative_incidence(frame).table
    assert set(split["group"]) == {"a", "b"}
    for label in ("a", "b"):
        alone = aalen_johansen(time[group == label], cause[group == label]).table
        part = split[split["group"] == label].reset_index(drop=True)
        assert_allclose(part["cumulative_incidence"], alone["cumulative_incidence"], rtol=1e-15)
    overall = cumulative_incidence(frame, by_group=False).table
    assert overall["n_at_risk"].max() == 200


def test_at_times_number_at_risk_counts_time_at_least_t_as_the_curves_do(tmp_path):
    """At a time that is not an observed time the number at risk is those with time >= t (and
    entry < t), counted by hand here, and equals the curves' at_risk of the same run."""
    from app.cli import main

    path = tmp_path / "cr.csv"
    pd.DataFrame(
        {
            "t": [1, 2, 3, 5, 8],
            "status": ["a", "censored", "b", "a", "censored"],
            "entry": [0, 0, 2.6, 0, 4.5],
        }
    ).to_csv(path, index=False)
    out = tmp_path / "r.json"
    args = [str(path), "--time", "t", "--event", "status", "--competing", "a=a"]
    args += ["--competing", "b=b", "--times", "2.5,4,4.5,5,9", "--json", str(out)]
    assert main(["analyze", *args]) == 0
    result = json.loads(out.read_text())
    rows = [r for r in result["competing"]["at_times"] if r["cause"] == "a"]
    # hand count: rows with t >= time: 2.5 -> {3, 5, 8}, 4 -> {5, 8}, 4.5 -> {5, 8}, 5 -> {5, 8}
    assert [r["n_at_risk"] for r in rows] == [3, 2, 2, 2, 0]
    curve_rows = result["curves"][0]["at_times"]
    assert [r["at_risk"] for r in curve_rows] == [3, 2, 2, 2, 0]
    assert main(["analyze", *args, "--entry", "entry"]) == 0
    result = json.loads(out.read_text())
    rows = [r for r in result["competing"]["at_times"] if r["cause"] == "b"]
    # with entry < t as well: 2.5 -> {5} (entered at 0), 4 -> {5}, 4.5 -> {5}, 5 -> {5, 8}
    assert [r["n_at_risk"] for r in rows] == [1, 1, 1, 2, 0]
    curve_rows = result["curves"][0]["at_times"]
    assert [r["at_risk"] for r in curve_rows] == [1, 1, 1, 2, 0]
