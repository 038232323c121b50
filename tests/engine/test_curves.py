"""Kaplan–Meier, survival at times, quantiles, numbers at risk, Nelson–Aalen, follow-up.

References: Freireich et al. (1963) data via Klein & Moeschberger (2003); statsmodels
`SurvfuncRight` (test-only reference library); lifelines fitters where the issue names them;
exact properties with hypothesis.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import KaplanMeierFitter, NelsonAalenFitter
from numpy.testing import assert_allclose
from statsmodels.duration.survfunc import SurvfuncRight

from engine.errors import AnalysisError
from engine.survival.curves import (
    TRANSFORMS,
    curves_by_group,
    kaplan_meier,
    median_follow_up,
    nelson_aalen,
    survival_at,
    survival_quantiles,
)
from engine.survival.summary import curves_json, group_summary, numbers_at_risk

STATSMODELS_QUANTILE_METHOD = {"log-log": "cloglog", "log": "log", "linear": "linear"}


def _arrays(frame: pd.DataFrame, group=None):
    rows = frame if group is None else frame[frame["_group"] == group]
    return rows["_time"].to_numpy(), rows["_event"].to_numpy()


# --- Freireich et al. (1963), 6-MP arm -------------------------------------------------------


def test_freireich_six_mp_survival_matches_published_values_and_statsmodels(freireich):
    # Published product-limit values for the 6-MP group (Klein & Moeschberger 2003, section 4.2;
    # from memory), rounded to 3 decimals; confirmed below with statsmodels SurvfuncRight.
    published = {6: 0.857, 7: 0.807, 10: 0.753, 13: 0.690, 16: 0.627, 22: 0.538, 23: 0.448}
    time, event = _arrays(freireich, "6-MP")
    at = survival_at(kaplan_meier(time, event), list(published)).frame
    assert_allclose(at["survival"], list(published.values()), atol=5e-4)
    reference = SurvfuncRight(time, event)
    assert_allclose(at["survival"], reference.surv_prob, rtol=1e-10)


def test_freireich_medians_are_23_and_8_weeks(freireich):
    # Medians 23 weeks (6-MP) and 8 weeks (placebo): Klein & Moeschberger (2003), from memory;
    # statsmodels SurvfuncRight.quantile agrees (no step of either curve sits exactly at 0.5).
    for group, published in (("6-MP", 23.0), ("placebo", 8.0)):
        time, event = _arrays(freireich, group)
        median = survival_quantiles(kaplan_meier(time, event), (0.5,)).row(0.5)
        assert median["estimate"] == published
        assert SurvfuncRight(time, event).quantile(0.5) == published


# --- statsmodels SurvfuncRight on simulated data with heavy ties -------------------------------


@pytest.mark.parametrize("group", ["g0", "g1", "g2", "g3"])
def test_survival_and_greenwood_se_match_statsmodels(simulated, group):
    time, event = _arrays(simulated, group)
    curve = kaplan_meier(time, event)
    reference = SurvfuncRight(time, event)
    at_events = curve.events > 0
    assert_allclose(curve.time[at_events], reference.surv_times)
    assert_allclose(curve.survival[at_events], reference.surv_prob, rtol=1e-6, atol=1e-10)
    finite = np.isfinite(reference.surv_prob_se)
    assert_allclose(curve.std_err[at_events][finite], reference.surv_prob_se[finite], rtol=1e-6)


@pytest.mark.parametrize("transform", TRANSFORMS)
@pytest.mark.parametrize("prob", [0.25, 0.5, 0.75])
@pytest.mark.parametrize("confidence", [0.9, 0.95])
def test_quantile_intervals_match_statsmodels(simulated, transform, prob, confidence):
    # statsmodels.SurvfuncRight.quantile_ci inverts z-tests on the same scale; the set it returns
    # equals the set where the pointwise band covers 1 - p, so the limits agree.
    time, event = _arrays(simulated, "g1")
    curve = kaplan_meier(time, event, confidence=confidence, transform=transform)
    assert not np.isclose(curve.survival, 1 - prob).any()  # statsmodels uses S < 1 - p
    row = survival_quantiles(curve, (prob,)).row(prob)
    reference = SurvfuncRight(time, event)
    lower, upper = reference.quantile_ci(
        prob, alpha=1 - confidence, method=STATSMODELS_QUANTILE_METHOD[transform]
    )
    assert row["estimate"] == reference.quantile(prob)
    assert row["lower"] == lower
    assert (row["upper"] is None and upper == np.inf) or row["upper"] == upper


@pytest.mark.parametrize("confidence", [0.8, 0.95, 0.99])
def test_log_log_band_matches_lifelines(simulated, confidence):
    # lifelines' Kaplan–Meier interval is the log(-log) ("exponential Greenwood") band.
    time, event = _arrays(simulated, "g2")
    curve = kaplan_meier(time, event, confidence=confidence)
    fitter = KaplanMeierFitter(alpha=1 - confidence).fit(time, event)
    band = fitter.confidence_interval_survival_function_.loc[curve.time].to_numpy()
    usable = curve.survival > 0
    assert_allclose(curve.lower[usable], band[usable, 0], rtol=1e-6)
    assert_allclose(curve.upper[usable], band[usable, 1], rtol=1e-6)


def test_log_and_linear_bands_follow_the_textbook_formulas_on_statsmodels_se(simulated):
    # Klein & Moeschberger (2003) eq. 4.3.1 (linear) and the log scale, from statsmodels' SE.
    time, event = _arrays(simulated, "g0")
    reference = SurvfuncRight(time, event)
    s, se = reference.surv_prob, reference.surv_prob_se
    z = 1.959963984540054
    keep = s > 0
    for transform, lower, upper in (
        ("linear", np.clip(s - z * se, 0, 1), np.clip(s + z * se, 0, 1)),
        ("log", s * np.exp(-z * se / s), np.minimum(1, s * np.exp(z * se / s))),
    ):
        curve = kaplan_meier(time, event, transform=transform)
        at_events = curve.events > 0
        assert_allclose(curve.lower[at_events][keep], lower[keep], rtol=1e-6)
        assert_allclose(curve.upper[at_events][keep], upper[keep], rtol=1e-6)


def test_delayed_entry_matches_lifelines_and_statsmodels():
    rng = np.random.default_rng(7)
    entry = rng.uniform(0, 4, 400)
    time = entry + np.ceil(rng.exponential(5, 400))  # ties among exit times
    event = rng.random(400) < 0.7
    curve = kaplan_meier(time, event, entry=entry)
    fitter = KaplanMeierFitter().fit(time, event, entry=entry)
    lifelines_s = fitter.survival_function_at_times(curve.time).to_numpy()
    assert_allclose(curve.survival, lifelines_s, rtol=1e-6)
    reference = SurvfuncRight(time, event.astype(float), entry=entry)
    at_events = curve.events > 0
    assert_allclose(curve.survival[at_events], reference.surv_prob, rtol=1e-6)
    assert_allclose(curve.std_err[at_events], reference.surv_prob_se, rtol=1e-6)


def test_entry_not_before_time_is_refused():
    with pytest.raises(AnalysisError, match="Entry times must be earlier") as caught:
        kaplan_meier([1.0, 2.0], [1, 1], entry=[0.5, 2.0])
    assert "_entry" not in str(caught.value)  # no working column in a message


def test_nelson_aalen_matches_lifelines_without_tie_smoothing(simulated):
    time, event = _arrays(simulated, "g3")
    curve = nelson_aalen(time, event, confidence=0.9)
    fitter = NelsonAalenFitter(alpha=0.1, nelson_aalen_smoothing=False).fit(time, event)
    assert_allclose(curve.cumulative_hazard, fitter.cumulative_hazard_.loc[curve.time].iloc[:, 0])
    band = fitter.confidence_interval_.loc[curve.time].to_numpy()
    assert_allclose(curve.lower, band[:, 0], rtol=1e-6)
    assert_allclose(curve.upper, band[:, 1], rtol=1e-6)


def test_median_follow_up_is_the_median_of_reverse_kaplan_meier(simulated):
    # statsmodels SurvfuncRight with the event indicator reversed (censoring as the event)
    time, event = _arrays(simulated)
    result = median_follow_up(time, event)
    reference = SurvfuncRight(time, 1 - event)
    assert not np.isclose(reference.surv_prob, 0.5).any()
    assert result.estimate == reference.quantile(0.5)
    assert (result.lower, result.upper) == tuple(reference.quantile_ci(0.5))


# --- counts: direct counting from the definitions ----------------------------------------------


def test_survival_at_counts_match_direct_counting(simulated):
    time, event = _arrays(simulated)
    times = [0.0, 1.0, 2.5, 6.0, 12.0, 20.0]
    at = survival_at(kaplan_meier(time, event), times).frame
    assert at["at_risk"].tolist() == [int((time >= t).sum()) for t in times]
    assert at["events_before"].tolist() == [int(((time < t) & (event == 1)).sum()) for t in times]
    assert at["censored_before"].tolist() == [int(((time < t) & (event == 0)).sum()) for t in times]
    lifelines_s = KaplanMeierFitter().fit(time, event).survival_function_at_times(times[:-1])
    assert_allclose(at["survival"][:-1], lifelines_s.to_numpy())
    assert np.isnan(at["survival"].iloc[-1])  # 20 is past the last observed time (12)


def test_numbers_at_risk_match_direct_counting(simulated):
    rng = np.random.default_rng(3)
    entry = rng.uniform(0, 0.9, len(simulated))
    time, event = _arrays(simulated)
    ticks = [0.0, 3.0, 6.0, 9.0]
    table = numbers_at_risk(time, event, simulated["_group"], ticks, entry=entry).frame
    for (label, tick), row in table.set_index(["group", "tick"]).iterrows():
        mine = (simulated["_group"] == label).to_numpy()
        end = np.inf if np.isnan(row["interval_end"]) else row["interval_end"]
        inside = mine & (time >= tick) & (time < end)
        assert row["at_risk"] == int((mine & (entry < tick) & (time >= tick)).sum())
        assert row["events"] == int((inside & (event == 1)).sum())
        assert row["censored"] == int((inside & (event == 0)).sum())
    assert table["group"].drop_duplicates().tolist() == ["g0", "g1", "g2", "g3"]


# --- exact properties (hypothesis) -------------------------------------------------------------

samples = st.lists(st.tuples(st.integers(0, 30), st.booleans()), min_size=1, max_size=60).map(
    lambda rows: (np.array([r[0] for r in rows], float), np.array([r[1] for r in rows]))
)


@settings(max_examples=150, deadline=None)
@given(samples, st.sampled_from(TRANSFORMS), st.floats(0.5, 0.999))
def test_survival_is_non_increasing_in_unit_interval_and_inside_its_band(data, transform, level):
    time, event = data
    curve = kaplan_meier(time, event, transform=transform, confidence=level)
    assert np.all(np.diff(curve.survival) <= 1e-12)
    assert np.all((curve.survival >= 0) & (curve.survival <= 1))
    ok = ~np.isnan(curve.lower)
    assert np.all(curve.lower[ok] <= curve.survival[ok] + 1e-12)
    assert np.all(curve.survival[ok] <= curve.upper[ok] + 1e-12)
    assert np.all((curve.lower[ok] >= 0) & (curve.upper[ok] <= 1))
    incidence = curve.incidence_frame()
    assert_allclose(incidence["incidence"], 1 - curve.survival)
    json.dumps(curve.to_dict(), allow_nan=False)


@settings(max_examples=150, deadline=None)
@given(st.lists(st.integers(0, 30), min_size=1, max_size=60))
def test_without_censoring_survival_is_one_minus_the_ecdf(values):
    time = np.array(values, float)
    curve = kaplan_meier(time, np.ones_like(time))
    ecdf = np.array([(time <= t).mean() for t in curve.time])
    assert_allclose(curve.survival, 1 - ecdf, atol=1e-12)


# --- prepared-frame wrappers and JSON ----------------------------------------------------------


def test_curves_by_group_gives_overall_first_then_category_order(freireich):
    freireich["_group"] = freireich["_group"].cat.reorder_categories(["placebo", "6-MP"])
    curves = curves_by_group(freireich).curves
    assert [c.label for c in curves] == [None, "placebo", "6-MP"]
    time, event = _arrays(freireich, "6-MP")
    assert_allclose(curves[2].survival, kaplan_meier(time, event).survival)
    assert [c.n for c in curves] == [42, 21, 21]


def test_curves_json_has_nulls_not_nan(freireich):
    out = curves_json(freireich, times=[10, 40])
    text = json.dumps(out, allow_nan=False)
    assert [c["group"] for c in out] == [None, "6-MP", "placebo"]
    six_mp = out[1]
    assert six_mp["median"]["estimate"] == 23.0
    assert six_mp["median"]["upper"] is None  # the upper band never falls to 0.5
    assert six_mp["at_times"][1]["survival"] is None  # week 40 is past follow-up (35+)
    assert out[2]["at_times"][1]["survival"] == 0.0  # placebo curve reached 0 at week 23
    assert "NaN" not in text


def test_group_summary_rows_agree_with_the_single_estimators(freireich):
    summary = group_summary(freireich, times=[10])
    frame = summary.to_frame()
    assert frame["group"].tolist() == [None, "6-MP", "placebo"]
    assert frame["events"].tolist() == [30, 9, 21]
    assert frame["censored"].tolist() == [12, 12, 0]
    assert frame.loc[1, "median"] == 23.0 and frame.loc[2, "median"] == 8.0
    assert_allclose(frame.loc[1, "survival_10"], 0.753, atol=5e-4)  # K&M (2003), as above
    assert summary.tau == 23.0  # smallest of the largest times: placebo's 23 weeks
    json.dumps(summary.to_dict(), allow_nan=False)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [({"confidence": 1.5}, "confidence"), ({"transform": "logit"}, "transform")],
)
def test_bad_settings_are_refused_with_a_clear_message(kwargs, message):
    with pytest.raises(AnalysisError, match=message):
        kaplan_meier([1.0, 2.0], [1, 0], **kwargs)


def test_negative_times_are_refused():
    with pytest.raises(AnalysisError, match="times must be finite and at least 0") as caught:
        kaplan_meier([-1.0, 2.0], [1, 0])
    assert "_time" not in str(caught.value)


def test_rows_without_a_group_count_in_all_rows_and_in_no_group(freireich):
    # The prepared frame keeps rows with no group value (engine.prepare.checks notes them).
    freireich.loc[[0, 30], "_group"] = np.nan
    curves = curves_by_group(freireich).curves
    assert [c.n for c in curves] == [42, 20, 20]
    time, event = _arrays(freireich.dropna(subset=["_group"]), "6-MP")
    assert_allclose(curves[1].survival, kaplan_meier(time, event).survival)
    everyone = kaplan_meier(freireich["_time"], freireich["_event"])
    assert_allclose(curves[0].survival, everyone.survival)
    assert group_summary(freireich).to_frame()["n"].tolist() == [42, 20, 20]


def test_median_where_the_curve_stays_at_one_half_is_the_start_of_that_interval(tmp_path):
    """S(t) is exactly 0.5 over [4, 6): the median is the first time S <= 0.5, the start of that
    interval (lifelines' rule too), not its end (6) nor its midpoint (5); the rule is stated in
    the quantiles' method and in the report's table note."""
    from app.cli import main
    from engine.survival.curves import MEDIAN_FOOTNOTE, MEDIAN_RULE

    time = [1, 2, 3, 4, 5, 6, 7, 8]
    event = [1, 1, 1, 1, 0, 1, 1, 1]
    # hand count: S(1) = 7/8, S(2) = 6/8, S(3) = 5/8, S(4) = 4/8 = 0.5 exactly; the censoring
    # at 5 leaves it there; S(6) = 0.5 * 2/3
    path = tmp_path / "half.csv"
    pd.DataFrame({"t": time, "e": event}).to_csv(path, index=False)
    out, report = tmp_path / "r.json", tmp_path / "r.html"
    args = ["analyze", str(path), "--time", "t", "--event", "e", "--json", str(out)]
    assert main([*args, "--report", str(report)]) == 0
    median = json.loads(out.read_text())["curves"][0]["median"]["estimate"]
    assert median == 4.0
    # lifelines takes the first time S <= 0.5 as well, but compares the rounded product: here
    # S(4) rounds to just above 0.5 and it answers 6; where the product rounds to 0.5 or below
    # (four events at 1, 2, 3, 4: S = 0.5 over [2, 3)) the two agree
    four = [1.0, 2.0, 3.0, 4.0]
    assert KaplanMeierFitter().fit(four, [1] * 4).median_survival_time_ == 2.0
    plateau = survival_quantiles(kaplan_meier(np.array(four), np.ones(4))).row(0.5)
    assert plateau["estimate"] == 2.0
    assert "S(t) ≤ 0.5" in MEDIAN_RULE and "midpoint" in MEDIAN_RULE
    curve = kaplan_meier(np.array(time, float), np.array(event))
    assert MEDIAN_RULE in survival_quantiles(curve).method
    assert MEDIAN_FOOTNOTE in report.read_text()
