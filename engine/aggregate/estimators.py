"""Curves, numbers at risk and the comparison tests from a ``CountTable``.

Each function gives the same result object as its row-level counterpart (``curves_by_group``,
``numbers_at_risk``, ``compare_frame``, ``trend_frame``, ``pairwise_frame``): the risk tables are
the same integers, and the row-level estimators then run on them unchanged.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
from scipy.stats import chi2

from engine.aggregate.counts import CountTable, risk_table, stratum_codes
from engine.errors import AnalysisError
from engine.survival.compare import (
    ComparisonResult,
    PairwiseTable,
    TrendResult,
    _check_test,
    _chi_square,
    _scores,
    bh_adjust,
    display_name,
    holm_adjust,
    trend_result,
)
from engine.survival.curves import CurveSet, check_times, curve_from_table
from engine.survival.summary import NumbersAtRiskTable, at_risk_table


def curves_from_counts(
    counts: CountTable, *, confidence: float = 0.95, transform: str = "log-log"
) -> CurveSet:
    """Kaplan–Meier for all rows, then per group (``curves_by_group`` on the rows)."""
    table = risk_table(counts)
    curves = [curve_from_table(table.pooled(None), confidence, transform)]
    if counts.group_labels is not None:
        k = len(table.labels) - (1 if table.labels and table.labels[-1] is None else 0)
        curves += [curve_from_table(table.column(g), confidence, transform) for g in range(k)]
    return CurveSet(tuple(curves))


def numbers_at_risk_from_counts(
    counts: CountTable, ticks=(0.0,), *, by_group: bool = True
) -> NumbersAtRiskTable:
    """`numbers_at_risk_frame` from the counts: at risk at each tick (time >= tick, less those
    entering at or after it) and events and censorings in [tick, next tick)."""
    ticks = check_times(ticks, "ticks")
    if ticks.size == 0 or np.any(np.diff(ticks) <= 0):
        raise AnalysisError(f"Ticks must be increasing and non-empty; got {ticks.tolist()}.")
    use_group = by_group and counts.group_labels is not None
    ex, en = counts.exits, counts.entries
    if use_group:
        ex = ex[ex["group"] >= 0]
        codes, labels = _present(ex["group"].to_numpy(), counts.group_labels)
    else:
        codes, labels = np.zeros(len(ex), np.int64), (None,)
    k, m = len(labels), ticks.size
    cells = (m + 1) * k
    key = np.searchsorted(ticks, ex["time"].to_numpy(), side="right") * k + codes
    d = ex["events"].to_numpy()
    everyone = _integer_sums(key, d + ex["censored"].to_numpy(), cells).reshape(m + 1, k)
    events = _integer_sums(key, d, cells).reshape(m + 1, k)
    at_risk = np.cumsum(everyone[::-1], axis=0)[::-1][1:]
    if en is not None:
        if use_group:
            en = en[en["group"] >= 0]
            en_codes = np.searchsorted(np.unique(ex["group"].to_numpy()), en["group"].to_numpy())
        else:
            en_codes = np.zeros(len(en), np.int64)
        en_key = np.searchsorted(ticks, en["entry"].to_numpy(), side="right") * k + en_codes
        late = _integer_sums(en_key, en["rows"].to_numpy(), cells).reshape(m + 1, k)
        at_risk = at_risk - np.cumsum(late[::-1], axis=0)[::-1][1:]
    return at_risk_table(labels, ticks, everyone, events, at_risk)


def _present(codes: np.ndarray, labels: tuple) -> tuple[np.ndarray, tuple]:
    present = np.unique(codes)
    return np.searchsorted(present, codes), tuple(labels[i] for i in present)


def _integer_sums(key, weights, cells):
    return np.rint(np.bincount(key, np.asarray(weights, float), cells)).astype(np.int64)


def _groups_for_test(counts: CountTable, strata: bool) -> tuple[int, ...]:
    """Group codes with rows among the complete cells (a group and, when stratified, a
    stratum), in category order; at least two."""
    if counts.group_labels is None:
        raise AnalysisError("Comparing survival needs a group column; set the group role.")
    ex = counts.exits
    ex = ex[(ex["group"] >= 0) & ((ex["stratum"] >= 0) if strata else True)]
    groups = tuple(sorted(int(g) for g in ex["group"].unique()))
    if len(groups) < 2:
        raise AnalysisError(
            f"Comparing survival needs at least two groups with rows; found {len(groups)}."
        )
    return groups


def _combined(counts: CountTable, groups, strata: bool, test, rho, gamma):
    k = len(groups)
    u, v, observed, expected = np.zeros(k), np.zeros((k, k)), np.zeros(k), np.zeros(k)
    chosen = stratum_codes(counts) if strata else [None]
    for s in chosen:
        table = risk_table(counts, stratum=s, groups=groups)
        su, sv, so, se = _scores(table, test, rho, gamma)
        u, v, observed, expected = u + su, v + sv, observed + so, expected + se
    return u, v, observed, expected, len(chosen)


def excluded_rows(counts: CountTable, strata: bool) -> int:
    """Rows a test leaves out for want of a group (or, stratified, a stratum)."""
    ex = counts.exits
    missing = (ex["group"] < 0) | ((ex["stratum"] < 0) if strata else False)
    return int((ex.loc[missing, "events"] + ex.loc[missing, "censored"]).sum())


def compare_from_counts(
    counts: CountTable,
    *,
    test: str = "logrank",
    rho: float = 0.0,
    gamma: float = 0.0,
    stratified: bool | None = None,
) -> ComparisonResult:
    """`compare_frame`: stratified when the counts have strata (or as ``stratified`` says)."""
    _check_test(test, rho, gamma)
    strata = counts.strata_labels is not None if stratified is None else bool(stratified)
    groups = _groups_for_test(counts, strata)
    u, v, observed, expected, n_strata = _combined(counts, groups, strata, test, rho, gamma)
    statistic, df = _chi_square(u, v)
    return ComparisonResult(
        test=display_name(test, rho, gamma),
        test_key=test,
        statistic=statistic,
        df=df,
        p_value=float(chi2.sf(statistic, df)),
        groups=tuple(counts.group_labels[g] for g in groups),
        observed=observed,
        expected=expected,
        n_strata=n_strata if strata else None,
        rho=float(rho),
        gamma=float(gamma),
        rows_excluded=excluded_rows(counts, strata),
    )


def trend_from_counts(
    counts: CountTable, *, scores=None, test: str = "logrank", rho=0.0, gamma=0.0
) -> TrendResult:
    """`trend_frame` with scores (default 1, 2, ... in category order)."""
    _check_test(test, rho, gamma)
    strata = counts.strata_labels is not None
    groups = _groups_for_test(counts, strata)
    c = np.arange(1.0, len(groups) + 1.0) if scores is None else np.asarray(scores, float)
    if c.shape != (len(groups),) or not np.isfinite(c).all():
        raise AnalysisError(f"Give one finite score per group ({len(groups)}); got {scores!r}.")
    u, v, _, _, _ = _combined(counts, groups, strata, test, rho, gamma)
    labels = [counts.group_labels[g] for g in groups]
    return trend_result(u, v, c, labels, test, rho, gamma)


def pairwise_from_counts(
    counts: CountTable, *, test: str = "logrank", rho: float = 0.0, gamma: float = 0.0
) -> PairwiseTable:
    """`pairwise_frame`: every pair on its own cells, Holm and Benjamini–Hochberg adjusted."""
    import pandas as pd

    _check_test(test, rho, gamma)
    strata = counts.strata_labels is not None
    groups = _groups_for_test(counts, strata)
    rows = []
    for a, b in combinations(groups, 2):
        u, v, _, _, _ = _pair_scores(counts, (a, b), strata, test, rho, gamma)
        statistic, df = _chi_square(u, v)
        labels = counts.group_labels
        rows.append((labels[a], labels[b], statistic, df, float(chi2.sf(statistic, df))))
    frame = pd.DataFrame(rows, columns=["group_a", "group_b", "statistic", "df", "p_value"])
    frame["p_holm"] = holm_adjust(frame["p_value"])
    frame["p_bh"] = bh_adjust(frame["p_value"])
    return PairwiseTable(display_name(test, rho, gamma), frame)


def _pair_scores(counts, pair, strata, test, rho, gamma):
    ex = counts.exits
    ex = ex[ex["group"].isin(pair) & ((ex["stratum"] >= 0) if strata else True)]
    if not strata:
        return _combined(counts, pair, False, test, rho, gamma)
    k = 2
    u, v, observed, expected = np.zeros(k), np.zeros((k, k)), np.zeros(k), np.zeros(k)
    for s in sorted(int(s) for s in ex["stratum"].unique()):
        table = risk_table(counts, stratum=s, groups=pair)
        su, sv, so, se = _scores(table, test, rho, gamma)
        u, v, observed, expected = u + su, v + sv, observed + so, expected + se
    return u, v, observed, expected, None
