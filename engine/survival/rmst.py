"""Restricted mean survival time (RMST): the area under the Kaplan–Meier step function up to τ.

Origin: with delayed entry no one is at risk before the first entry, and the curve is 1 there;
by default the area is taken from time 0 (S = 1 before the first entry), and on request from the
first entry of all rows (``RMST_ORIGINS``), which gives the same area less that first entry (no
event can come before it) with the same variance. Each result states which origin it used.

Variance (Klein & Moeschberger 2003, section 4.5): Var = Σ over event times t_j <= τ of
A_j² · d_j / (n_j (n_j − d_j)), where A_j is the area under the curve from t_j to τ. Between two
groups: difference ± z·sqrt(V1 + V2); ratio on the log scale with se² = V1/μ1² + V2/μ2²; both
with two-sided normal p-values.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import norm

from engine.errors import AnalysisError, SettingError, shown_value
from engine.json_values import json_float, json_label
from engine.survival.curves import SurvivalCurve, curve_from_table, frame_columns, z_value
from engine.survival.risk_table import build_risk_table, group_codes

DEFAULT_TAU_RULE = "smallest of the groups' largest observed times"
RMST_ORIGINS = ("zero", "first_entry")  # where the area under the curve starts


def rmst_origin(curve: SurvivalCurve, origin: str = "zero") -> tuple[float, str | None]:
    """The origin of the area (0, or the first entry of ``curve``'s rows, ``origin`` =
    "first_entry") and the sentence saying which was used; None when there is no delayed entry
    after time 0 (both conventions then agree)."""
    if origin not in RMST_ORIGINS:
        raise SettingError(
            f"The RMST origin {shown_value(origin)} is not known; use 'zero' (time 0) or "
            "'first_entry' (the first entry time)."
        )
    first = float(curve.entry[0]) if curve.entry is not None and curve.entry.size else 0.0
    if first <= 0:
        return 0.0, None
    if origin == "first_entry":
        return first, (
            f"With delayed entry the restricted mean runs from the first entry (time {first:g}), "
            f"as chosen; taken from time 0 (S = 1 before the first entry) it would be {first:g} "
            "longer."
        )
    return 0.0, (
        "With delayed entry the restricted mean runs from time 0 and takes S = 1 before the "
        f"first entry (time {first:g}); another common convention starts at the first entry "
        "(RMST origin: the first entry; --rmst-origin first-entry on the command line)."
    )


@dataclass(frozen=True)
class RMSTEstimate:
    label: object
    tau: float
    estimate: float
    std_err: float
    lower: float
    upper: float
    confidence: float

    def to_dict(self) -> dict:
        return {
            "group": json_label(self.label),
            "tau": float(self.tau),
            "estimate": json_float(self.estimate),
            "std_err": json_float(self.std_err),
            "lower": json_float(self.lower),
            "upper": json_float(self.upper),
        }

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([self.to_dict()])


def _supported_until(curve: SurvivalCurve) -> float:
    """Largest τ the curve supports: its last time, or any τ once S has reached 0."""
    if curve.time.size == 0:
        return 0.0
    return np.inf if curve.survival[-1] <= 0 else float(curve.time[-1])


def rmst_from_curve(curve: SurvivalCurve, tau: float, origin: float = 0.0) -> RMSTEstimate:
    """RMST of one Kaplan–Meier curve from ``origin`` (0, or a first entry before which no
    event can come: ``rmst_origin``) to τ, with Greenwood-type standard error."""
    tau = float(tau)
    if not np.isfinite(tau) or tau <= 0:
        raise AnalysisError(f"The RMST horizon tau must be a positive number; got {tau!r}.")
    if tau <= origin:
        raise AnalysisError(
            f"The RMST horizon tau = {tau:g} must be later than its origin, the first entry "
            f"(time {origin:g}); choose a later tau or the origin 0."
        )
    limit = _supported_until(curve)
    if tau > limit:
        raise AnalysisError(
            f"tau = {tau:g} is beyond the follow-up of group {shown_value(curve.label)}, whose "
            f"largest observed time is {limit:g} with survival still above 0; choose "
            f"tau <= {limit:g}."
        )
    inside = curve.time < tau
    t = curve.time[inside]
    s = curve.survival[inside]
    edges = np.concatenate(([0.0], t, [tau]))
    heights = np.concatenate(([1.0], s))
    cumulative = np.concatenate(([0.0], np.cumsum(heights * np.diff(edges))))
    total = float(cumulative[-1])
    after = total - cumulative[1:-1]  # area from each t_j to tau
    n = curve.at_risk[inside].astype(float)
    d = curve.events[inside].astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where((d > 0) & (n > d), after**2 * d / (n * (n - d)), 0.0)
    std_err = float(np.sqrt(terms.sum()))
    z = z_value(curve.confidence)
    total -= origin  # S = 1 on [0, origin]: no event before the first entry
    return RMSTEstimate(
        curve.label, tau, total, std_err, total - z * std_err, total + z * std_err, curve.confidence
    )


def rmst(time, event, *, tau: float, confidence: float = 0.95, entry=None, label=None):
    """RMST to τ for one sample."""
    table = build_risk_table(time, event, labels=(label,), entry=entry)
    return rmst_from_curve(curve_from_table(table, confidence), tau)


@dataclass(frozen=True)
class RMSTContrast:
    """Group b against group a: difference b − a and ratio b / a."""

    group_a: object
    group_b: object
    difference: float
    difference_se: float
    difference_lower: float
    difference_upper: float
    difference_p: float
    ratio: float
    ratio_lower: float
    ratio_upper: float
    ratio_p: float

    def to_dict(self) -> dict:
        out = {
            k: json_float(v) for k, v in self.__dict__.items() if k not in ("group_a", "group_b")
        }
        return {"group_a": json_label(self.group_a), "group_b": json_label(self.group_b), **out}


def rmst_contrast(a: RMSTEstimate, b: RMSTEstimate) -> RMSTContrast:
    """Difference and ratio of two independent RMST estimates at the same τ."""
    if a.tau != b.tau:
        raise AnalysisError(
            f"RMSTs at different horizons ({a.tau:g}, {b.tau:g}) cannot be compared."
        )
    z = z_value(a.confidence)
    diff = b.estimate - a.estimate
    se = float(np.hypot(a.std_err, b.std_err))
    with np.errstate(divide="ignore", invalid="ignore"):
        p_diff = float(2 * norm.sf(abs(diff) / se)) if se > 0 else np.nan
        log_ratio = np.log(b.estimate / a.estimate)
        se_log = float(np.hypot(a.std_err / a.estimate, b.std_err / b.estimate))
        p_ratio = float(2 * norm.sf(abs(log_ratio) / se_log)) if se_log > 0 else np.nan
    return RMSTContrast(
        a.label,
        b.label,
        float(diff),
        se,
        float(diff - z * se),
        float(diff + z * se),
        p_diff,
        float(np.exp(log_ratio)),
        float(np.exp(log_ratio - z * se_log)),
        float(np.exp(log_ratio + z * se_log)),
        p_ratio,
    )


@dataclass(frozen=True)
class RMSTTable:
    """RMST per group at a common τ, the rule that chose τ, and the contrast when two groups."""

    tau: float
    tau_rule: str
    estimates: tuple[RMSTEstimate, ...]
    contrast: RMSTContrast | None
    origin: float = 0.0  # where the area starts (``rmst_origin``)
    origin_rule: str | None = None  # the sentence saying so, with delayed entry

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([e.to_dict() for e in self.estimates])

    def to_dict(self) -> dict:
        return {
            "tau": float(self.tau),
            "tau_rule": self.tau_rule,
            "origin": float(self.origin),
            "origin_rule": self.origin_rule,
            "groups": [e.to_dict() for e in self.estimates],
            "contrast": None if self.contrast is None else self.contrast.to_dict(),
        }


def default_tau(curves) -> tuple[float, str]:
    """The smallest of the groups' largest observed times, and a sentence saying so."""
    lasts = [(float(c.time[-1]), c.label) for c in curves if c.time.size]
    tau, label = min(lasts, key=lambda x: x[0])
    return tau, f"the {DEFAULT_TAU_RULE} (group {label})"


def rmst_by_group(
    time,
    event,
    group=None,
    *,
    tau: float | None = None,
    confidence: float = 0.95,
    entry=None,
    include_overall: bool = False,
    origin: str = "zero",
) -> RMSTTable:
    """RMST per group (category order); with exactly two groups, the second against the first.
    ``origin``: "zero" or "first_entry" (the first entry of all these rows, one for every
    group, so the groups' areas cover the same span)."""
    codes, labels = group_codes(group, len(np.asarray(time)))
    table = build_risk_table(time, event, codes, labels, entry)
    pooled = curve_from_table(table.pooled(None), confidence)
    start = rmst_origin(pooled, origin)
    if group is None:
        return _rmst_table([pooled], [pooled], tau, start)
    groups = [curve_from_table(table.column(g), confidence) for g in range(len(labels))]
    return _rmst_table([pooled, *groups] if include_overall else groups, groups, tau, start)


def rmst_frame(
    frame: pd.DataFrame,
    *,
    tau: float | None = None,
    confidence: float = 0.95,
    origin: str = "zero",
) -> RMSTTable:
    """RMST on a prepared frame: all rows first, then each group (rows without a group count
    only in the first); τ defaults to the smallest of the groups' largest observed times."""
    time, event, codes, labels, entry = frame_columns(frame)
    table = build_risk_table(time, event, codes, labels, entry)
    pooled = curve_from_table(table.pooled(None), confidence)
    start = rmst_origin(pooled, origin)
    if "_group" not in frame.columns:
        return _rmst_table([pooled], [pooled], tau, start)
    groups = [curve_from_table(table.column(g), confidence) for g in range(len(labels))]
    return _rmst_table([pooled, *groups], groups, tau, start)


def _rmst_table(curves, groups, tau, start=(0.0, None)) -> RMSTTable:
    """Estimates for `curves` at τ (default from `groups`) from the origin of ``start``
    (``rmst_origin``); the contrast when two groups."""
    if tau is None:
        tau, rule = default_tau(groups)
    else:
        rule = "chosen by the user"
    estimates = tuple(rmst_from_curve(c, tau, start[0]) for c in curves)
    by_label = {e.label: e for e in estimates[len(curves) - len(groups) :]}
    contrast = None
    if len(groups) == 2:
        contrast = rmst_contrast(by_label[groups[0].label], by_label[groups[1].label])
    return RMSTTable(float(tau), rule, estimates, contrast, float(start[0]), start[1])
