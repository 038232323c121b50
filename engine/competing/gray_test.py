"""Gray's test: is the cumulative incidence of one cause the same in every group?

Gray (1988, Annals of Statistics 16:1141–1154) compares the groups' subdistribution hazards, the
hazard of the cause among subjects who have not had it (those with another event stay "at risk"
for ever). In group k at time t the subdistribution risk set is estimated by

    R_k(t) = Y_k(t) (1 - F_k(t-)) / S_k(t-),

Y_k the number at risk, F_k the Aalen–Johansen cumulative incidence of the cause and S_k the
Kaplan–Meier survival from any event (all within group k). With log-rank weights (Gray's rho = 0)
the statistic for group k is observed minus expected events of the cause,

    z_k = sum over t of ( d_k(t) - R_k(t) d(t) / R(t) ),   R = sum of R_k, d = sum of d_k.

Its covariance comes from writing z_k as a sum of cause-specific martingale increments (the
delta-method expansion of the Aalen–Johansen and Kaplan–Meier estimates inside R_k):

    z_k ~ sum over groups l of  sum_t a_kl(t) dM_1l(t) + b_kl(t) dM_2l(t)
    a_kl = c_kl - F2_l B_kl / Y_l,   b_kl = -(1 - F_l) B_kl / Y_l,   c_kl = [k = l] - R_k / R,
    B_kl(u) = sum over t > u of c_kl(t) d_l(t) / (1 - F_l(t-)),

M_1l, M_2l the martingales of the cause and of the other causes in group l, F2_l the cumulative
incidence of the other causes. The variation of M_2l is estimated by its events; that of M_1l
under the null hypothesis, by the pooled share R_l d / R with the hypergeometric correction for
tied events (R - d) / (R - 1). With a single cause F2 = 0, R_k = Y_k and the whole test is the
log-rank test exactly. Degrees of freedom: groups - 1. With strata, z and its covariance are
summed over the strata. Delayed entry is allowed (entry < t <= time).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import chi2

from engine.competing.incidence import _cause_codes
from engine.errors import AnalysisError, preview_values
from engine.json_values import json_float
from engine.survival.compare import _chi_square
from engine.survival.risk_table import as_float_array, checked_entry, group_codes, without_missing


@dataclass(frozen=True)
class GrayTest:
    """Gray's test for one cause: chi-square statistic on groups - 1 degrees of freedom."""

    cause: str
    statistic: float
    df: int
    p_value: float
    groups: tuple[str, ...]
    observed: tuple[float, ...]  # events of the cause per group
    expected: tuple[float, ...]  # expected under equal cumulative incidence

    def to_dict(self) -> dict:
        return {
            "cause": self.cause,
            "statistic": json_float(self.statistic),
            "df": int(self.df),
            "p_value": json_float(self.p_value),
        }

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame(
            {
                "cause": self.cause,
                "group": list(self.groups),
                "observed": list(self.observed),
                "expected": list(self.expected),
                "statistic": self.statistic,
                "df": self.df,
                "p_value": self.p_value,
            }
        )


def _per_group_counts(time, codes, group, n_groups, entry):
    """Distinct times; at risk, events of the cause (code 0) and of other causes per group."""
    times, key = np.unique(time, return_inverse=True)
    m = len(times)
    flat = key * n_groups + group
    size = m * n_groups
    removed = np.bincount(flat, minlength=size).reshape(m, n_groups)
    d1 = np.bincount(flat[codes == 0], minlength=size).reshape(m, n_groups).astype(float)
    d2 = np.bincount(flat[codes > 0], minlength=size).reshape(m, n_groups).astype(float)
    at_risk = np.cumsum(removed[::-1], axis=0)[::-1]
    if entry is not None:
        entered = np.searchsorted(times, entry, side="right")  # distinct times <= entry
        late = np.bincount(entered * n_groups + group, minlength=(m + 1) * n_groups)
        late = late.reshape(m + 1, n_groups)
        at_risk = at_risk - np.cumsum(late[::-1], axis=0)[::-1][1:]
    return at_risk.astype(float), d1, d2


def stratum_scores(y, d1, d2):
    """z, its covariance, observed and expected events of the cause within one stratum, from
    its per-time counts (times x groups): at risk, events of the cause, events of the others."""
    n_groups = y.shape[1]
    with np.errstate(divide="ignore", invalid="ignore"):
        surv = np.cumprod(np.where(y > 0, 1.0 - (d1 + d2) / y, 1.0), axis=0)
        surv_lag = np.vstack([np.ones((1, n_groups)), surv[:-1]])
        f1 = np.cumsum(np.where(y > 0, surv_lag * d1 / y, 0.0), axis=0)
        f2 = np.cumsum(np.where(y > 0, surv_lag * d2 / y, 0.0), axis=0)
        f1_lag = np.vstack([np.zeros((1, n_groups)), f1[:-1]])
        risk = np.where(y > 0, y * (1.0 - f1_lag) / surv_lag, 0.0)
        total = risk.sum(axis=1)
        d = d1.sum(axis=1)
        share = np.where(total[:, None] > 0, risk / total[:, None], 0.0)
        c = np.eye(n_groups)[None, :, :] - share[:, :, None]  # c[t, k, l]
        increment = np.where(1.0 - f1_lag > 0, d1 / (1.0 - f1_lag), 0.0)  # [t, l]
        x = c * increment[:, None, :]
        b_sum = np.cumsum(x[::-1], axis=0)[::-1] - x  # sum over later times
        per_y = np.where(y > 0, 1.0 / y, 0.0)[:, None, :]
        a = c - f2[:, None, :] * b_sum * per_y
        b = -(1.0 - f1[:, None, :]) * b_sum * per_y
        ties = np.where(total > 1, (total - d) / (total - 1.0), 0.0)
    v1 = share * (d * ties)[:, None]  # [t, l]
    cov = np.einsum("tkl,tjl,tl->kj", a, a, v1) + np.einsum("tkl,tjl,tl->kj", b, b, d2)
    expected = (share * d[:, None]).sum(axis=0)
    observed = d1.sum(axis=0)
    return observed - expected, cov, observed, expected


def gray_test(time, cause, group, *, of: str, strata=None, entry=None) -> GrayTest:
    """Gray's test of equal cumulative incidence of cause ``of`` across the groups.

    ``cause`` holds a cause name per row (None = censored); rows of other causes are competing
    events. ``group`` is a Categorical or array (levels in category order, at least two).
    """
    time = as_float_array(time, "_time")
    n = len(time)
    cause_codes, names = _cause_codes(cause, n)
    if of not in names:
        raise AnalysisError(
            f"Gray's test needs events of the cause {of!r}, which does not occur; the causes "
            f"are {preview_values(names)}."
        )
    target = names.index(of)
    # 0 = the cause, 1 = another cause, -1 = censored
    codes = np.where(cause_codes < 0, -1, np.where(cause_codes == target, 0, 1))
    series = group if isinstance(group, pd.Series) else pd.Series(group)
    group_code, labels = group_codes(series, n)
    if len(labels) < 2:
        raise AnalysisError(
            f"Gray's test compares groups and needs at least two; found {len(labels)}. "
            "Set a group column with two or more levels."
        )
    if entry is not None:
        entry = checked_entry(entry, time)
    stratum = np.zeros(n, dtype=np.intp)
    if strata is not None:
        stratum, _ = group_codes(pd.Series(strata), n, name="_strata")
    k = len(labels)
    parts = []
    for s in np.unique(stratum):
        rows = stratum == s
        counts = _per_group_counts(
            time[rows], codes[rows], group_code[rows], k, None if entry is None else entry[rows]
        )
        parts.append(stratum_scores(*counts))
    return gray_result(of, labels, parts)


def gray_result(of: str, labels, parts) -> GrayTest:
    """Gray's test from the ``stratum_scores`` of each stratum, summed."""
    z, cov, observed, expected = (sum(p[i] for p in parts) for i in range(4))
    statistic, df = _chi_square(z, cov)
    return GrayTest(
        cause=of,
        statistic=statistic,
        df=df,
        p_value=float(chi2.sf(statistic, df)),
        groups=tuple(str(label) for label in labels),
        observed=tuple(float(v) for v in observed),
        expected=tuple(float(v) for v in expected),
    )


def gray_tests(frame: pd.DataFrame) -> tuple[GrayTest, ...]:
    """Gray's test for every cause of a prepared frame with ``_cause`` and ``_group`` (stratified
    by ``_strata``, delayed entry from ``_entry`` when present); rows without a group are left
    out."""
    if "_cause" not in frame.columns or "_group" not in frame.columns:
        raise AnalysisError(
            "Gray's test needs causes and groups: map the event values to causes and set the "
            "group role."
        )
    frame, _ = without_missing(frame)
    _, names = _cause_codes(frame["_cause"], len(frame))
    entry = frame["_entry"] if "_entry" in frame.columns else None
    strata = frame["_strata"] if "_strata" in frame.columns else None
    return tuple(
        gray_test(
            frame["_time"], frame["_cause"], frame["_group"], of=name, strata=strata, entry=entry
        )
        for name in names
    )
