"""Curves, numbers at risk and comparison tests from per-time counts equal the row-level results.

Outside reference: statsmodels' SurvfuncRight with ``freq_weights`` on the aggregated cells
(one row per distinct time and event status, weighted by its count) equals Hazel's row-level
Kaplan–Meier, so the counts carry everything the estimate needs.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from statsmodels.duration.survfunc import SurvfuncRight

from engine.aggregate.counts import counts_from_frame, risk_table
from engine.aggregate.estimators import (
    compare_from_counts,
    curves_from_counts,
    numbers_at_risk_from_counts,
    pairwise_from_counts,
    trend_from_counts,
)
from engine.survival.compare import compare_frame, pairwise_frame, trend_frame
from engine.survival.curves import curves_by_group, kaplan_meier
from engine.survival.risk_table import build_risk_table
from engine.survival.summary import numbers_at_risk_frame


def random_prepared(seed: int, n: int = 400, *, entry=False, strata=False, missing_group=False):
    """A prepared-like frame: day-rounded times (many ties), 3 groups, optional strata/entry."""
    rng = np.random.default_rng(seed)
    time = np.round(rng.exponential(20, n)) + 1.0
    frame = pd.DataFrame(
        {
            "_time": time,
            "_event": (rng.random(n) < 0.6).astype(np.int64),
            "_group": pd.Categorical(rng.choice(["b", "a", "c"], n), categories=["a", "b", "c"]),
        }
    )
    if missing_group:
        frame.loc[rng.random(n) < 0.1, "_group"] = np.nan
    if strata:
        frame["_strata"] = pd.Categorical(rng.choice(["s1", "s2"], n))
        frame.loc[rng.random(n) < 0.05, "_strata"] = np.nan
    if entry:
        frame["_entry"] = np.floor(time * rng.random(n) * 0.8)
        frame.loc[rng.random(n) < 0.5, "_entry"] = 0.0
    return frame


CASES = {
    "plain": {},
    "entry": {"entry": True},
    "strata": {"strata": True},
    "everything": {"entry": True, "strata": True, "missing_group": True},
}


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_curves_equal_row_level(case, seed):
    frame = random_prepared(seed, **CASES[case])
    rows = curves_by_group(frame).curves
    cells = curves_from_counts(counts_from_frame(frame)).curves
    assert [c.label for c in rows] == [c.label for c in cells]
    for a, b in zip(rows, cells, strict=True):
        assert a.n == b.n
        assert_array_equal(a.time, b.time)
        assert_array_equal(a.at_risk, b.at_risk)
        assert_array_equal(a.events, b.events)
        assert_allclose(b.survival, a.survival, rtol=1e-12)
        assert_allclose(b.lower, a.lower, rtol=1e-12)


@pytest.mark.parametrize("case", CASES)
def test_risk_table_counts_are_identical(case):
    frame = random_prepared(7, **CASES[case])
    codes = frame["_group"].cat.codes.to_numpy()
    codes = np.where(codes < 0, 3, codes)
    entry = frame["_entry"].to_numpy() if "_entry" in frame else None
    rows = build_risk_table(frame["_time"], frame["_event"], codes, ("a", "b", "c"), entry)
    cells = risk_table(counts_from_frame(frame))
    assert_array_equal(rows.times, cells.times)
    assert_array_equal(rows.at_risk, cells.at_risk)
    assert_array_equal(rows.events, cells.events)
    assert_array_equal(rows.censored, cells.censored)


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize(
    "test,rho,gamma",
    [("logrank", 0, 0), ("gehan-breslow", 0, 0), ("peto-peto", 0, 0), ("fleming-harrington", 1, 1)],
)
def test_comparisons_equal_row_level(case, test, rho, gamma):
    frame = random_prepared(11, **CASES[case])
    counts = counts_from_frame(frame)
    a = compare_frame(frame, test=test, rho=rho, gamma=gamma).to_dict()
    b = compare_from_counts(counts, test=test, rho=rho, gamma=gamma).to_dict()
    assert_allclose(b.pop("statistic"), a.pop("statistic"), rtol=1e-9)
    assert_allclose(b.pop("p_value"), a.pop("p_value"), rtol=1e-9)
    for x, y in zip(a.pop("groups"), b.pop("groups"), strict=True):
        assert x["group"] == y["group"]
        assert_allclose([y["observed"], y["expected"]], [x["observed"], x["expected"]], rtol=1e-9)
    assert a == b
    t1 = trend_frame(frame, test=test, rho=rho, gamma=gamma)
    t2 = trend_from_counts(counts, test=test, rho=rho, gamma=gamma)
    assert_allclose(t2.z, t1.z, rtol=1e-9)
    p1 = pairwise_frame(frame, test=test, rho=rho, gamma=gamma).frame
    p2 = pairwise_from_counts(counts, test=test, rho=rho, gamma=gamma).frame
    assert_array_equal(p1[["group_a", "group_b", "df"]], p2[["group_a", "group_b", "df"]])
    assert_allclose(p2[["statistic", "p_holm"]], p1[["statistic", "p_holm"]], rtol=1e-9)


@pytest.mark.parametrize("case", ["plain", "entry"])
def test_numbers_at_risk_equal_row_level(case):
    frame = random_prepared(5, **CASES[case])
    ticks = (0.0, 5.0, 12.5, 40.0)
    rows = numbers_at_risk_frame(frame, ticks).frame
    cells = numbers_at_risk_from_counts(counts_from_frame(frame), ticks).frame
    pd.testing.assert_frame_equal(rows, cells, check_dtype=False)


def test_statsmodels_weighted_km_on_the_cells_equals_hazel_on_the_rows():
    frame = random_prepared(3)
    counts = (
        counts_from_frame(frame).exits.groupby("time", as_index=False)[["events", "censored"]].sum()
    )
    cells = pd.concat(
        [
            pd.DataFrame({"time": counts["time"], "status": 1, "w": counts["events"]}),
            pd.DataFrame({"time": counts["time"], "status": 0, "w": counts["censored"]}),
        ]
    )
    cells = cells[cells["w"] > 0]
    reference = SurvfuncRight(cells["time"], cells["status"], freq_weights=cells["w"])
    ours = kaplan_meier(frame["_time"], frame["_event"])
    at_events = ours.events > 0
    assert_allclose(reference.surv_times, ours.time[at_events])
    assert_allclose(reference.surv_prob, ours.survival[at_events], rtol=1e-12)
    # statsmodels' weighted standard error is not a frequency-weight Greenwood sum (checked
    # here: it differs), so the standard error is compared with its unweighted fit on the rows.
    rows = SurvfuncRight(frame["_time"], frame["_event"])
    assert_allclose(rows.surv_prob_se, ours.std_err[at_events], rtol=1e-9)
