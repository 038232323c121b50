"""Comparing survival between groups: log-rank and weighted tests, stratified, trend, pairwise.

At each distinct event time t_j (pooled over groups within a stratum) with n_j at risk and d_j
events, group g contributes O_gj − E_gj = d_gj − n_gj·d_j/n_j. With a weight w_j,

    U_g  = Σ_j w_j (d_gj − n_gj d_j / n_j)
    V_gh = Σ_j w_j² · d_j (n_j − d_j) / (n_j − 1) · (n_gj/n_j) (δ_gh − n_hj/n_j)

and the statistic is U' V⁻ U on k − 1 degrees of freedom, computed by dropping the last group
(a generalised inverse is used if that block is singular, with df = its rank). Strata add their
U and V. Weights: log-rank 1; Gehan–Breslow n_j; Tarone–Ware √n_j; Peto–Peto
Π_{i≤j}(1 − d_i/(n_i + 1)); Fleming–Harrington(ρ, γ) Ŝ(t_j−)^ρ (1 − Ŝ(t_j−))^γ with Ŝ the pooled
Kaplan–Meier of the stratum.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from itertools import combinations

import numpy as np
import pandas as pd
from scipy.stats import chi2

from engine.errors import AnalysisError
from engine.json_values import json_float, json_label
from engine.survival.risk_table import RiskTable, build_risk_table, group_codes, without_missing

TESTS = ("logrank", "gehan-breslow", "tarone-ware", "peto-peto", "fleming-harrington")


def display_name(test: str, rho: float = 0.0, gamma: float = 0.0) -> str:
    """The name shown in results for a test key."""
    names = {
        "logrank": "log-rank",
        "gehan-breslow": "Gehan–Breslow",
        "tarone-ware": "Tarone–Ware",
        "peto-peto": "Peto–Peto",
    }
    if test == "fleming-harrington":
        return f"Fleming–Harrington(ρ={rho:g}, γ={gamma:g})"
    return names[test]


def _check_test(test: str, rho: float, gamma: float) -> None:
    if test not in TESTS:
        raise AnalysisError(f"Unknown test {test!r}; choose one of {', '.join(TESTS)}.")
    if rho < 0 or gamma < 0:
        raise AnalysisError(
            f"Fleming–Harrington exponents must be >= 0; got rho={rho!r}, gamma={gamma!r}."
        )


def _weights(test: str, n: np.ndarray, d: np.ndarray, rho: float, gamma: float) -> np.ndarray:
    """Weights at the pooled event times of one stratum."""
    if test == "logrank":
        return np.ones_like(n)
    if test == "gehan-breslow":
        return n.copy()
    if test == "tarone-ware":
        return np.sqrt(n)
    if test == "peto-peto":
        return np.cumprod(1.0 - d / (n + 1.0))
    km = np.cumprod(1.0 - d / n)
    left = np.concatenate(([1.0], km[:-1]))  # S(t-)
    return left**rho * (1.0 - left) ** gamma


def _scores(table: RiskTable, test: str, rho: float, gamma: float):
    """U, V, observed and expected events from one stratum's risk table."""
    d_tot_all = table.events.sum(axis=1)
    keep = d_tot_all > 0
    n_g = table.at_risk[keep].astype(float)
    d_g = table.events[keep].astype(float)
    n = n_g.sum(axis=1)
    d = d_g.sum(axis=1)
    w = _weights(test, n, d, rho, gamma)
    share = n_g / n[:, None]
    expected = share * d[:, None]
    u = (w[:, None] * (d_g - expected)).sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        spread = np.where(n > 1, d * (n - d) / (n - 1.0), 0.0)
    a = w**2 * spread
    root = share * np.sqrt(a)[:, None]
    v = np.diag((share * a[:, None]).sum(axis=0)) - root.T @ root
    return u, v, d_g.sum(axis=0), expected.sum(axis=0)


def _chi_square(u: np.ndarray, v: np.ndarray) -> tuple[float, int]:
    """U' V⁻ U dropping the last group; generalised inverse if that block is singular."""
    u1, v1 = u[:-1], v[:-1, :-1]
    rank = int(np.linalg.matrix_rank(v1)) if v1.size else 0
    if rank == 0:
        raise AnalysisError(
            "The groups cannot be compared: there is no variation in who has the events "
            "(too few events or subjects at risk). Check the group and event columns."
        )
    if rank == v1.shape[0]:
        return float(u1 @ np.linalg.solve(v1, u1)), rank
    return float(u1 @ np.linalg.pinv(v1) @ u1), rank


@dataclass(frozen=True)
class ComparisonResult:
    """A k-group test: statistic on df degrees of freedom, and events per group."""

    test: str  # display name, e.g. "log-rank"
    test_key: str
    statistic: float
    df: int
    p_value: float
    groups: tuple
    observed: np.ndarray
    expected: np.ndarray
    n_strata: int | None = None
    rho: float = 0.0
    gamma: float = 0.0
    rows_excluded: int = 0  # rows left out for a missing group or stratum

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame(
            {
                "group": list(self.groups),
                "observed": self.observed,
                "expected": self.expected,
                "test": self.test,
                "statistic": self.statistic,
                "df": self.df,
                "p_value": self.p_value,
            }
        )

    def to_dict(self) -> dict:
        out = {
            "test": self.test,
            "statistic": json_float(self.statistic),
            "df": int(self.df),
            "p_value": json_float(self.p_value),
            "groups": [
                {"group": json_label(g), "observed": json_float(o), "expected": json_float(e)}
                for g, o, e in zip(self.groups, self.observed, self.expected, strict=True)
            ],
            "stratified": self.n_strata is not None,
            "rows_excluded": self.rows_excluded,
        }
        if self.n_strata is not None:
            out["strata"] = self.n_strata
        return out


def _stratum_tables(time, event, codes, labels, strata, entry):
    """One risk table per stratum (the whole data when no strata are given)."""
    if strata is None:
        yield build_risk_table(time, event, codes, labels, entry)
        return
    s_codes, s_labels = group_codes(pd.Series(strata), len(codes), name="_strata")
    time, event = np.asarray(time), np.asarray(event)
    for s in range(len(s_labels)):
        rows = s_codes == s
        sub_entry = None if entry is None else np.asarray(entry)[rows]
        yield build_risk_table(time[rows], event[rows], codes[rows], labels, sub_entry)


def _combined_scores(time, event, codes, labels, strata, entry, test, rho, gamma):
    k = len(labels)
    u, v = np.zeros(k), np.zeros((k, k))
    observed, expected = np.zeros(k), np.zeros(k)
    for table in _stratum_tables(time, event, codes, labels, strata, entry):
        su, sv, so, se = _scores(table, test, rho, gamma)
        u, v, observed, expected = u + su, v + sv, observed + so, expected + se
    return u, v, observed, expected


def _codes_for_test(group, n: int):
    codes, labels = group_codes(group, n)
    if len(labels) < 2:
        raise AnalysisError(
            f"Comparing survival needs at least two groups with rows; found {len(labels)}."
        )
    return codes, labels


def compare_survival(
    time,
    event,
    group,
    *,
    test: str = "logrank",
    rho: float = 0.0,
    gamma: float = 0.0,
    strata=None,
    entry=None,
) -> ComparisonResult:
    """Test equal survival across k groups (df = k − 1), optionally stratified."""
    _check_test(test, rho, gamma)
    codes, labels = _codes_for_test(group, len(np.asarray(time)))
    u, v, observed, expected = _combined_scores(
        time, event, codes, labels, strata, entry, test, rho, gamma
    )
    statistic, df = _chi_square(u, v)
    n_strata = None if strata is None else int(pd.Series(strata).nunique())
    return ComparisonResult(
        test=display_name(test, rho, gamma),
        test_key=test,
        statistic=statistic,
        df=df,
        p_value=float(chi2.sf(statistic, df)),
        groups=labels,
        observed=observed,
        expected=expected,
        n_strata=n_strata,
        rho=float(rho),
        gamma=float(gamma),
    )


def _frame_arguments(frame: pd.DataFrame) -> tuple[tuple, dict, int]:
    """The arguments a test takes from a prepared frame: (time, event, group), the strata and
    entry keywords, and how many rows were left out for want of a group or stratum."""
    if "_group" not in frame.columns:
        raise AnalysisError("Comparing survival needs a group column; set the group role.")
    frame, excluded = without_missing(frame)
    arrays = (frame["_time"].to_numpy(), frame["_event"].to_numpy(), frame["_group"])
    keywords = {
        "strata": frame["_strata"] if "_strata" in frame.columns else None,
        "entry": frame["_entry"].to_numpy() if "_entry" in frame.columns else None,
    }
    return arrays, keywords, excluded


def compare_frame(
    frame: pd.DataFrame, *, test: str = "logrank", rho: float = 0.0, gamma: float = 0.0
) -> ComparisonResult:
    """`compare_survival` on a prepared frame, stratified when it has `_strata`; rows without
    a group or stratum are left out and counted in ``rows_excluded``."""
    arrays, keywords, excluded = _frame_arguments(frame)
    result = compare_survival(*arrays, test=test, rho=rho, gamma=gamma, **keywords)
    return replace(result, rows_excluded=excluded)


@dataclass(frozen=True)
class TrendResult:
    """Test for a monotone trend across ordered groups: Z = c'U / sqrt(c'Vc), 1 df."""

    test: str
    statistic: float
    z: float
    df: int
    p_value: float
    groups: tuple
    scores: tuple

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{k: v for k, v in self.to_dict().items() if k != "scores"}])

    def to_dict(self) -> dict:
        return {
            "test": self.test,
            "statistic": json_float(self.statistic),
            "z": json_float(self.z),
            "df": self.df,
            "p_value": json_float(self.p_value),
            "scores": [
                {"group": json_label(g), "score": float(s)}
                for g, s in zip(self.groups, self.scores, strict=True)
            ],
        }


def trend_test(
    time,
    event,
    group,
    *,
    scores=None,
    order=None,
    test: str = "logrank",
    rho: float = 0.0,
    gamma: float = 0.0,
    strata=None,
    entry=None,
) -> TrendResult:
    """Trend across ordered groups. Give `scores` (one per group, in category order) or
    `order` (group labels from lowest to highest, scored 1, 2, ...); default: category order."""
    _check_test(test, rho, gamma)
    codes, labels = _codes_for_test(group, len(np.asarray(time)))
    if scores is not None and order is not None:
        raise AnalysisError("Give either scores or an order for the trend test, not both.")
    if order is not None:
        missing = [g for g in labels if g not in list(order)]
        if missing or len(order) != len(labels):
            raise AnalysisError(
                f"The order must list each group once; groups are {list(labels)}, "
                f"order given {list(order)}."
            )
        c = np.array([list(order).index(g) + 1.0 for g in labels])
    elif scores is not None:
        c = np.asarray(scores, dtype=float)
        if c.shape != (len(labels),) or not np.isfinite(c).all():
            raise AnalysisError(
                f"Give one finite score per group ({len(labels)}: {list(labels)}); got {scores!r}."
            )
    else:
        c = np.arange(1.0, len(labels) + 1.0)
    u, v, _, _ = _combined_scores(time, event, codes, labels, strata, entry, test, rho, gamma)
    return trend_result(u, v, c, labels, test, rho, gamma)


def trend_result(u, v, scores, groups, test: str, rho: float, gamma: float) -> TrendResult:
    """The trend test from the groups' observed-minus-expected ``u`` and their covariance ``v``
    (from rows or from per-time counts alike)."""
    variance = float(scores @ v @ scores)
    if variance <= 0:
        raise AnalysisError("The trend test has no variance: the scores or events do not vary.")
    z = float(scores @ u) / np.sqrt(variance)
    return TrendResult(
        test=f"{display_name(test, rho, gamma)} test for trend",
        statistic=z * z,
        z=z,
        df=1,
        p_value=float(chi2.sf(z * z, 1)),
        groups=tuple(groups),
        scores=tuple(float(x) for x in scores),
    )


def trend_frame(
    frame: pd.DataFrame,
    *,
    scores=None,
    order=None,
    test: str = "logrank",
    rho: float = 0.0,
    gamma: float = 0.0,
) -> TrendResult:
    """`trend_test` on a prepared frame, stratified when it has `_strata`; rows without a group
    or stratum are left out."""
    arrays, keywords, _ = _frame_arguments(frame)
    return trend_test(
        *arrays, scores=scores, order=order, test=test, rho=rho, gamma=gamma, **keywords
    )


def holm_adjust(p_values) -> np.ndarray:
    """Holm's step-down adjusted p-values (family-wise error)."""
    p = np.asarray(p_values, dtype=float)
    m = p.size
    order = np.argsort(p, kind="stable")
    stepped = np.minimum(1.0, np.maximum.accumulate((m - np.arange(m)) * p[order]))
    out = np.empty(m)
    out[order] = stepped
    return out


def bh_adjust(p_values) -> np.ndarray:
    """Benjamini–Hochberg step-up adjusted p-values (false discovery rate)."""
    p = np.asarray(p_values, dtype=float)
    m = p.size
    order = np.argsort(p, kind="stable")
    scaled = p[order] * m / np.arange(1, m + 1)
    stepped = np.minimum(1.0, np.minimum.accumulate(scaled[::-1])[::-1])
    out = np.empty(m)
    out[order] = stepped
    return out


@dataclass(frozen=True)
class PairwiseTable:
    """Every pair of groups tested on its own rows, with raw and adjusted p-values."""

    test: str
    frame: pd.DataFrame  # group_a, group_b, statistic, df, p_value, p_holm, p_bh

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def to_dict(self) -> dict:
        return {
            "test": self.test,
            "pairs": [
                {
                    "group_a": json_label(r.group_a),
                    "group_b": json_label(r.group_b),
                    "statistic": json_float(r.statistic),
                    "df": int(r.df),
                    "p_value": json_float(r.p_value),
                    "p_holm": json_float(r.p_holm),
                    "p_bh": json_float(r.p_bh),
                }
                for r in self.frame.itertuples(index=False)
            ],
        }


def pairwise_comparisons(
    time,
    event,
    group,
    *,
    test: str = "logrank",
    rho: float = 0.0,
    gamma: float = 0.0,
    strata=None,
    entry=None,
) -> PairwiseTable:
    """All pairs in category order; Holm and Benjamini–Hochberg adjust over the pairs."""
    _check_test(test, rho, gamma)
    time = np.asarray(time)
    event = np.asarray(event)
    codes, labels = _codes_for_test(group, len(time))
    strata = None if strata is None else np.asarray(strata, dtype=object)
    entry = None if entry is None else np.asarray(entry)
    rows = []
    for a, b in combinations(range(len(labels)), 2):
        mask = (codes == a) | (codes == b)
        sub_codes = np.where(codes[mask] == a, 0, 1)
        sub_group = pd.Categorical.from_codes(sub_codes, categories=[labels[a], labels[b]])
        result = compare_survival(
            time[mask],
            event[mask],
            pd.Series(sub_group),
            test=test,
            rho=rho,
            gamma=gamma,
            strata=None if strata is None else strata[mask],
            entry=None if entry is None else entry[mask],
        )
        rows.append((labels[a], labels[b], result.statistic, result.df, result.p_value))
    frame = pd.DataFrame(rows, columns=["group_a", "group_b", "statistic", "df", "p_value"])
    frame["p_holm"] = holm_adjust(frame["p_value"])
    frame["p_bh"] = bh_adjust(frame["p_value"])
    return PairwiseTable(display_name(test, rho, gamma), frame)


def pairwise_frame(
    frame: pd.DataFrame, *, test: str = "logrank", rho: float = 0.0, gamma: float = 0.0
) -> PairwiseTable:
    """`pairwise_comparisons` on a prepared frame, stratified when it has `_strata`; rows
    without a group or stratum are left out."""
    arrays, keywords, _ = _frame_arguments(frame)
    return pairwise_comparisons(*arrays, test=test, rho=rho, gamma=gamma, **keywords)
