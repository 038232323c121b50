"""Group comparisons: log-rank and weighted tests, strata, trend, pairwise and p-value adjustment.

References: Freireich et al. (1963) data via Klein & Moeschberger (2003); statsmodels
`survdiff` and `multipletests` (test-only reference library); lifelines
`multivariate_logrank_test` for the weights statsmodels lacks; exact properties with hypothesis.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines.statistics import multivariate_logrank_test
from numpy.testing import assert_allclose
from statsmodels.duration.survfunc import survdiff
from statsmodels.stats.multitest import multipletests
from survival_reference_data import simulate

from engine.errors import AnalysisError
from engine.survival.compare import (
    bh_adjust,
    compare_frame,
    compare_survival,
    holm_adjust,
    pairwise_comparisons,
    pairwise_frame,
    trend_frame,
    trend_test,
)
from engine.survival.summary import comparison_json


def _columns(frame: pd.DataFrame):
    return frame["_time"].to_numpy(), frame["_event"].to_numpy(), frame["_group"]


# --- Freireich et al. (1963) -------------------------------------------------------------------


@pytest.mark.parametrize(
    ("test", "weight_type", "published"),
    [("logrank", None, 16.79), ("gehan-breslow", "gb", 13.46)],
)
def test_freireich_statistics_match_published_values_and_statsmodels(
    freireich, test, weight_type, published
):
    # Log-rank chi-square 16.79 and Gehan–Breslow 13.46 on 1 df: Klein & Moeschberger (2003),
    # chapter 7 (from memory); confirmed with statsmodels survdiff.
    time, event, group = _columns(freireich)
    result = compare_survival(time, event, group, test=test)
    assert result.df == 1
    assert round(result.statistic, 2) == published
    reference, p_value = survdiff(time, event, np.asarray(group), weight_type=weight_type)
    assert_allclose(result.statistic, reference, rtol=1e-10)
    assert_allclose(result.p_value, p_value, rtol=1e-6)


def test_freireich_observed_and_expected_events(freireich):
    # Observed events are direct counts (9 and 21); expected events sum to the 30 observed.
    time, event, group = _columns(freireich)
    result = compare_survival(time, event, group)
    assert result.observed.tolist() == [9.0, 21.0]
    assert_allclose(result.expected.sum(), 30.0)
    assert result.to_dict()["test"] == "log-rank"


# --- statsmodels survdiff, four groups, heavy ties --------------------------------------------

STATSMODELS_WEIGHTS = [
    ("logrank", None, {}, 0.0),
    ("gehan-breslow", "gb", {}, 0.0),
    ("tarone-ware", "tw", {}, 0.0),
    ("fleming-harrington", "fh", {"fh_p": 0.5}, 0.5),
    ("fleming-harrington", "fh", {"fh_p": 1.0}, 1.0),
    ("fleming-harrington", "fh", {"fh_p": 2.0}, 2.0),
]


@pytest.mark.parametrize(("test", "weight_type", "kwargs", "rho"), STATSMODELS_WEIGHTS)
@pytest.mark.parametrize("stratified", [False, True])
def test_k_group_tests_match_statsmodels_survdiff(
    simulated, test, weight_type, kwargs, rho, stratified
):
    time, event, group = _columns(simulated)
    strata = simulated["_strata"] if stratified else None
    result = compare_survival(time, event, group, test=test, rho=rho, strata=strata)
    reference, p_value = survdiff(
        time,
        event,
        np.asarray(group),
        weight_type=weight_type,
        strata=None if strata is None else np.asarray(strata),
        **kwargs,
    )
    assert result.df == 3
    assert_allclose(result.statistic, reference, rtol=1e-6)
    assert_allclose(result.p_value, p_value, rtol=1e-6, atol=1e-12)


def test_delayed_entry_log_rank_matches_statsmodels_survdiff():
    frame = simulate(11, n=500, groups=3)
    rng = np.random.default_rng(11)
    entry = rng.uniform(0, 0.95, len(frame))
    time, event, group = _columns(frame)
    result = compare_survival(time, event, group, entry=entry)
    reference, _ = survdiff(time, event, np.asarray(group), entry=entry)
    assert_allclose(result.statistic, reference, rtol=1e-6)


@pytest.mark.parametrize(
    ("test", "rho", "gamma", "lifelines_kwargs"),
    [
        ("peto-peto", 0.0, 0.0, {"weightings": "peto"}),
        ("fleming-harrington", 0.0, 1.0, {"weightings": "fleming-harrington", "p": 0, "q": 1}),
        ("fleming-harrington", 1.0, 1.0, {"weightings": "fleming-harrington", "p": 1, "q": 1}),
    ],
)
def test_peto_and_fleming_harrington_gamma_match_lifelines(
    simulated, test, rho, gamma, lifelines_kwargs
):
    # statsmodels has no Peto–Peto and no γ > 0; lifelines' multivariate_logrank_test has both.
    time, event, group = _columns(simulated)
    result = compare_survival(time, event, group, test=test, rho=rho, gamma=gamma)
    reference = multivariate_logrank_test(time, np.asarray(group), event, **lifelines_kwargs)
    assert result.df == reference.degrees_of_freedom
    assert_allclose(result.statistic, reference.test_statistic, rtol=1e-6)


def test_stratified_log_rank_is_the_sum_over_strata_not_the_pooled_test(simulated):
    time, event, group = _columns(simulated)
    stratified = compare_survival(time, event, group, strata=simulated["_strata"])
    pooled = compare_survival(time, event, group)
    assert stratified.to_dict()["stratified"] is True and stratified.n_strata == 3
    assert stratified.statistic != pytest.approx(pooled.statistic)
    assert_allclose(stratified.observed, pooled.observed)


# --- exact properties ------------------------------------------------------------------------


@settings(max_examples=40, deadline=None)
@given(
    st.integers(0, 10_000),
    st.sampled_from(["logrank", "gehan-breslow", "tarone-ware", "peto-peto", "fleming-harrington"]),
)
def test_statistics_do_not_change_when_labels_are_renamed_or_rows_shuffled(seed, test):
    frame = simulate(seed, n=120, groups=3, strata=2)
    time, event, group = _columns(frame)
    base = compare_survival(time, event, group, test=test, rho=1.0, gamma=0.5)
    order = np.random.default_rng(seed).permutation(len(frame))
    renamed = pd.Categorical(np.asarray(group)[order]).rename_categories(["zeta", "alpha", "mu"])
    shuffled = compare_survival(
        time[order], event[order], pd.Series(renamed), test=test, rho=1.0, gamma=0.5
    )
    assert_allclose(shuffled.statistic, base.statistic, rtol=1e-9)
    assert shuffled.df == base.df
    assert_allclose(np.sort(shuffled.expected), np.sort(base.expected), rtol=1e-9)


def test_expected_events_sum_to_observed(simulated):
    time, event, group = _columns(simulated)
    result = compare_survival(time, event, group, strata=simulated["_strata"])
    assert_allclose(result.expected.sum(), event.sum())
    counts = pd.Series(event).groupby(np.asarray(group)).sum().to_numpy()
    assert_allclose(result.observed, counts)


# --- trend -----------------------------------------------------------------------------------


def test_trend_with_two_groups_equals_the_two_group_test(freireich):
    # With two groups U_1 = -U_2 and the 1-df trend statistic is the ordinary chi-square.
    time, event, group = _columns(freireich)
    trend = trend_test(time, event, group, test="tarone-ware")
    assert_allclose(
        trend.statistic, compare_survival(time, event, group, test="tarone-ware").statistic
    )


def test_trend_is_invariant_to_affine_changes_of_the_scores(simulated):
    # Σ U = 0 and V·1 = 0, so scores a + b·c give the same statistic (b ≠ 0).
    time, event, group = _columns(simulated)
    plain = trend_test(time, event, group, scores=[1, 2, 3, 4])
    shifted = trend_test(time, event, group, scores=[10, 13, 16, 19])
    by_order = trend_test(time, event, group, order=["g0", "g1", "g2", "g3"])
    assert_allclose(shifted.statistic, plain.statistic)
    assert_allclose(by_order.statistic, plain.statistic)
    reversed_order = trend_test(time, event, group, order=["g3", "g2", "g1", "g0"])
    assert_allclose(reversed_order.z, -plain.z)


# --- pairwise and adjustments ----------------------------------------------------------------


def test_pairwise_uses_each_pair_alone_and_adjusts_like_statsmodels(simulated):
    time, event, group = _columns(simulated)
    table = pairwise_comparisons(time, event, group, test="gehan-breslow").frame
    assert len(table) == 6
    labels = np.asarray(group)
    for row in table.itertuples():
        rows = np.isin(labels, [row.group_a, row.group_b])
        reference, p_value = survdiff(time[rows], event[rows], labels[rows], weight_type="gb")
        assert_allclose(row.statistic, reference, rtol=1e-6)
        assert_allclose(row.p_value, p_value, rtol=1e-6, atol=1e-14)
    assert_allclose(table["p_holm"], multipletests(table["p_value"], method="holm")[1])
    assert_allclose(table["p_bh"], multipletests(table["p_value"], method="fdr_bh")[1])


@settings(max_examples=200, deadline=None)
@given(st.lists(st.floats(0.0, 1.0), min_size=1, max_size=30))
def test_adjustments_match_statsmodels_multipletests(p_values):
    assert_allclose(holm_adjust(p_values), multipletests(p_values, method="holm")[1], atol=1e-12)
    assert_allclose(bh_adjust(p_values), multipletests(p_values, method="fdr_bh")[1], atol=1e-12)


# --- errors and JSON -------------------------------------------------------------------------


def test_one_group_and_unknown_test_are_refused():
    with pytest.raises(AnalysisError, match="two groups"):
        compare_survival([1.0, 2.0], [1, 1], ["a", "a"])
    with pytest.raises(AnalysisError, match="Unknown test"):
        compare_survival([1.0, 2.0], [1, 1], ["a", "b"], test="wilcoxon")


def test_comparison_json_keys_and_null_without_group(freireich):
    out = comparison_json(freireich)
    assert set(out) == {"test", "statistic", "df", "p_value", "rows_excluded"}
    assert out["test"] == "log-rank" and out["df"] == 1
    json.dumps(out, allow_nan=False)
    assert comparison_json(freireich.drop(columns="_group")) is None
    full = compare_frame(freireich, test="peto-peto").to_dict()
    assert full["test"] == "Peto–Peto" and len(full["groups"]) == 2


def test_compare_frame_leaves_out_rows_without_group_or_stratum(simulated):
    simulated.loc[[0, 1, 2], "_group"] = np.nan
    simulated.loc[[2, 3], "_strata"] = np.nan
    result = compare_frame(simulated)
    kept = simulated.dropna(subset=["_group", "_strata"])
    reference, _ = survdiff(
        kept["_time"],
        kept["_event"],
        np.asarray(kept["_group"]),
        strata=np.asarray(kept["_strata"]),
    )
    assert result.rows_excluded == 4 and result.to_dict()["rows_excluded"] == 4
    assert_allclose(result.statistic, reference, rtol=1e-6)


def test_trend_and_pairwise_frames_leave_out_rows_without_group_or_stratum(simulated):
    simulated.loc[[0, 1, 2], "_group"] = np.nan
    simulated.loc[[2, 3], "_strata"] = np.nan
    kept = simulated.dropna(subset=["_group", "_strata"])
    time, event, group = _columns(kept)
    strata = np.asarray(kept["_strata"])
    labels = np.asarray(group)
    pairs = pairwise_frame(simulated, test="gehan-breslow").frame
    assert len(pairs) == 6
    for row in pairs.itertuples():
        rows = np.isin(labels, [row.group_a, row.group_b])
        reference, _ = survdiff(
            time[rows], event[rows], labels[rows], strata=strata[rows], weight_type="gb"
        )
        assert_allclose(row.statistic, reference, rtol=1e-6)
    # Two groups: the 1-df trend statistic is the stratified two-group chi-square.
    two = kept.loc[kept["_group"].isin(["g0", "g1"])]
    two_labels = np.asarray(two["_group"]).astype(str)
    reference, _ = survdiff(
        two["_time"], two["_event"], two_labels, strata=np.asarray(two["_strata"])
    )
    two_frame = simulated.loc[simulated["_group"].isin(["g0", "g1"]) | simulated["_group"].isna()]
    two_frame = two_frame.assign(_group=two_frame["_group"].cat.remove_unused_categories())
    assert_allclose(trend_frame(two_frame).statistic, reference, rtol=1e-6)
