"""Gray's test: the log-rank test when there is one cause, its size under the null hypothesis,
and its invariance to how the groups are labelled."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines.statistics import multivariate_logrank_test
from numpy.testing import assert_allclose

from engine.competing.gray_test import gray_test, gray_tests
from engine.errors import AnalysisError
from engine.survival.compare import compare_survival


def _competing(rng, n, groups=2, continuous=True, shift=0.0, censor_by_group=False):
    """Two latent causes, independent censoring; cause "relapse" is faster in groups > 0 by
    ``shift`` (0: the null hypothesis holds for every cause)."""
    group = rng.integers(0, groups, n)
    t1 = rng.exponential(10.0 * np.exp(-shift * (group > 0)), n)
    t2 = rng.weibull(0.8, n) * 9.0
    upper = np.where(group == 0, 15.0, 40.0) if censor_by_group else 25.0
    censor = rng.uniform(0.0, upper, n)
    time = np.minimum.reduce([t1, t2, censor])
    if not continuous:
        time, t1, t2, censor = (np.ceil(v) for v in (time, t1, t2, censor))
    cause = np.where(
        (time == t1) & (t1 < censor),
        "relapse",
        np.where((time == t2) & (t2 < censor), "death", None),
    )
    return time, cause, pd.Categorical([f"arm {g}" for g in group])


@pytest.mark.parametrize("continuous", [True, False], ids=["no ties", "tied times"])
@pytest.mark.parametrize("groups", [2, 4])
def test_one_cause_is_the_log_rank_test(rng, continuous, groups):
    """With no competing cause, Gray's test is the log-rank test exactly (an exact property),
    checked against lifelines' multivariate_logrank_test (hypergeometric variance)."""
    n = 300
    time = rng.exponential(10.0, n)
    if not continuous:
        time = np.ceil(time)
    event = rng.random(n) < 0.7
    group = rng.integers(0, groups, n)
    ours = gray_test(time, np.where(event, "event", None), pd.Categorical(group), of="event")
    reference = multivariate_logrank_test(time, group, event)
    assert ours.df == groups - 1
    assert_allclose(ours.statistic, reference.test_statistic, rtol=1e-10)
    assert_allclose(ours.p_value, reference.p_value, rtol=1e-8)


def test_stratified_one_cause_is_the_stratified_log_rank_test(rng):
    n = 400
    time = np.ceil(rng.exponential(8.0, n))
    event = rng.random(n) < 0.6
    group = pd.Categorical(rng.integers(0, 3, n))
    strata = rng.integers(0, 2, n)
    ours = gray_test(time, np.where(event, "event", None), group, of="event", strata=strata)
    log_rank = compare_survival(time, event.astype(int), group, strata=strata)
    assert_allclose(ours.statistic, log_rank.statistic, rtol=1e-10)


def test_delayed_entry_one_cause_is_the_log_rank_test(rng):
    n = 300
    entry = rng.uniform(0.0, 5.0, n)
    time = entry + rng.exponential(10.0, n)
    event = rng.random(n) < 0.7
    group = pd.Categorical(rng.integers(0, 2, n))
    ours = gray_test(time, np.where(event, "event", None), group, of="event", entry=entry)
    log_rank = compare_survival(time, event.astype(int), group, entry=entry)
    assert_allclose(ours.statistic, log_rank.statistic, rtol=1e-10)


@pytest.mark.parametrize(
    "groups, continuous, censor_by_group",
    [(2, True, False), (3, True, True), (2, False, True)],
    ids=["two groups", "three groups, unequal censoring", "tied times, unequal censoring"],
)
def test_size_under_the_null_hypothesis(groups, continuous, censor_by_group):
    """Seeded simulation with equal cumulative incidence in every group: the rejection rate at
    the 5% level over 500 data sets lies within 0.05 +- 0.035 (about 3.6 binomial standard
    errors), and the mean statistic is near its degrees of freedom. The seed is fixed, so the
    check is deterministic; the bounds are wide enough to hold for other seeds as well."""
    rng = np.random.default_rng(1988)
    rejected, statistics = 0, []
    for _ in range(500):
        time, cause, group = _competing(
            rng, 150, groups, continuous=continuous, censor_by_group=censor_by_group
        )
        result = gray_test(time, cause, group, of="relapse")
        rejected += result.p_value < 0.05
        statistics.append(result.statistic)
    assert 0.015 <= rejected / 500 <= 0.085
    assert abs(np.mean(statistics) - (groups - 1)) < 0.25 * (groups - 1)


def test_detects_a_difference_in_incidence():
    rng = np.random.default_rng(7)
    time, cause, group = _competing(rng, 600, 2, shift=0.8)
    assert gray_test(time, cause, group, of="relapse").p_value < 1e-4


@settings(max_examples=40, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    order=st.permutations(range(3)),
    names=st.lists(st.text(min_size=1, max_size=6), min_size=3, max_size=3, unique=True),
)
def test_relabelling_groups_leaves_the_test_unchanged(seed, order, names):
    rng = np.random.default_rng(seed)
    time, cause, group = _competing(rng, 120, 3, continuous=False)
    original = gray_test(time, cause, group, of="relapse")
    codes = np.asarray(group.codes)
    renamed = np.asarray(names, dtype=object)[codes]
    relabelled = pd.Categorical(renamed, categories=[names[i] for i in order])
    again = gray_test(time, cause, relabelled, of="relapse")
    assert_allclose(again.statistic, original.statistic, rtol=1e-8, atol=1e-10)
    assert again.df == original.df


def test_every_cause_from_a_prepared_frame(rng):
    time, cause, group = _competing(rng, 300, 2)
    frame = pd.DataFrame({"_time": time, "_cause": cause, "_group": group})
    frame.loc[frame.index[:5], "_group"] = None  # rows without a group are left out
    tests = gray_tests(frame)
    assert [t.cause for t in tests] == ["death", "relapse"]
    direct = gray_test(time[5:], cause[5:], group[5:], of="relapse")
    assert_allclose(tests[1].statistic, direct.statistic)
    assert set(tests[0].to_dict()) == {"cause", "statistic", "df", "p_value"}


def test_errors_name_the_problem(rng):
    time, cause, group = _competing(rng, 50, 2)
    with pytest.raises(AnalysisError, match="'stroke'"):
        gray_test(time, cause, group, of="stroke")
    with pytest.raises(AnalysisError, match="at least two"):
        gray_test(time, cause, pd.Categorical(["a"] * 50), of="relapse")
