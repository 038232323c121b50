"""Kaplan–Meier and Nelson–Aalen curves, survival at chosen times and survival quantiles.

Kaplan–Meier uses Greenwood's variance, Var(log S(t)) = sum over event times t_j <= t of
d_j / (n_j (n_j - d_j)), with pointwise intervals on one of three scales:

- ``"log-log"`` (default): S^exp(±z·sqrt(V)/log S), always inside [0, 1];
- ``"log"``: S·exp(±z·sqrt(V)), upper limit capped at 1;
- ``"linear"``: S ± z·S·sqrt(V), clipped to [0, 1].

Where the estimate has reached 0 the variance is infinite and the interval is not estimable
(NaN here, ``None`` in JSON).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import norm

from engine.errors import AnalysisError
from engine.json_values import json_float, json_int, json_label
from engine.survival.risk_table import (
    RiskTable,
    as_event_array,
    at_risk_at,
    build_risk_table,
    group_codes,
)

TRANSFORMS = ("log-log", "log", "linear")


def z_value(confidence: float) -> float:
    """Two-sided normal quantile for a confidence level strictly between 0 and 1."""
    if not 0.0 < float(confidence) < 1.0:
        raise AnalysisError(
            f"The confidence level must be between 0 and 1 (e.g. 0.95); got {confidence!r}."
        )
    return float(norm.ppf(0.5 + float(confidence) / 2.0))


def _check_transform(transform: str) -> str:
    if transform not in TRANSFORMS:
        raise AnalysisError(
            f"Unknown interval transform {transform!r}; choose one of {', '.join(TRANSFORMS)}."
        )
    return transform


def survival_band(survival, greenwood, z: float, transform: str) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise lower and upper limits of S from Greenwood's sum V on the chosen scale."""
    s = np.asarray(survival, dtype=float)
    root = np.sqrt(greenwood)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if transform == "linear":
            half = z * s * root
            lower, upper = np.clip(s - half, 0.0, 1.0), np.clip(s + half, 0.0, 1.0)
        elif transform == "log":
            lower = s * np.exp(-z * root)
            upper = np.minimum(s * np.exp(z * root), 1.0)
        else:
            spread = z * root / np.abs(np.log(s))
            lower, upper = s ** np.exp(spread), s ** np.exp(-spread)
    at_one = s >= 1.0
    lower = np.where(at_one, 1.0, lower)
    upper = np.where(at_one, 1.0, upper)
    not_estimable = (s <= 0.0) | ~np.isfinite(greenwood)
    lower = np.where(not_estimable, np.nan, lower)
    upper = np.where(not_estimable, np.nan, upper)
    return lower, upper


@dataclass(frozen=True)
class SurvivalCurve:
    """A Kaplan–Meier estimate at each distinct observed time (events or censorings)."""

    label: object
    n: int
    confidence: float
    transform: str
    time: np.ndarray
    at_risk: np.ndarray
    events: np.ndarray
    censored: np.ndarray
    survival: np.ndarray
    std_err: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    greenwood: np.ndarray  # Greenwood's sum, Var(log S); kept for quantiles and RMST
    entry: np.ndarray | None = None  # with delayed entry: the rows' entry times, ascending

    @property
    def total_events(self) -> int:
        return int(self.events.sum())

    @property
    def total_censored(self) -> int:
        return int(self.censored.sum())

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame(
            {
                "group": [self.label] * len(self.time),
                "time": self.time,
                "at_risk": self.at_risk,
                "events": self.events,
                "censored": self.censored,
                "survival": self.survival,
                "std_err": self.std_err,
                "lower": self.lower,
                "upper": self.upper,
            }
        )

    def incidence_frame(self) -> pd.DataFrame:
        """Cumulative incidence 1 − S with its interval (the survival limits reflected)."""
        return pd.DataFrame(
            {
                "group": [self.label] * len(self.time),
                "time": self.time,
                "incidence": 1.0 - self.survival,
                "lower": 1.0 - self.upper,
                "upper": 1.0 - self.lower,
            }
        )

    def to_dict(self) -> dict:
        rows = self.to_frame().drop(columns="group")
        return {
            "group": json_label(self.label),
            "n": self.n,
            "events": self.total_events,
            "censored": self.total_censored,
            "confidence": self.confidence,
            "transform": self.transform,
            "points": [
                {
                    "time": json_float(r.time),
                    "at_risk": json_int(r.at_risk),
                    "events": json_int(r.events),
                    "censored": json_int(r.censored),
                    "survival": json_float(r.survival),
                    "std_err": json_float(r.std_err),
                    "lower": json_float(r.lower),
                    "upper": json_float(r.upper),
                }
                for r in rows.itertuples(index=False)
            ],
        }


def curve_from_table(
    table: RiskTable, confidence: float = 0.95, transform: str = "log-log"
) -> SurvivalCurve:
    """Kaplan–Meier from the counts of a one-column risk table."""
    z = z_value(confidence)
    _check_transform(transform)
    n_risk = table.at_risk[:, 0].astype(float)
    d = table.events[:, 0].astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        survival = np.cumprod(1.0 - d / n_risk)
        terms = np.where(d > 0, d / (n_risk * (n_risk - d)), 0.0)
    greenwood = np.cumsum(terms)
    with np.errstate(invalid="ignore"):
        std_err = np.where(survival > 0, survival * np.sqrt(greenwood), np.nan)
    lower, upper = survival_band(survival, greenwood, z, transform)
    n = int(table.events[:, 0].sum() + table.censored[:, 0].sum())
    return SurvivalCurve(
        label=table.labels[0],
        n=n,
        confidence=float(confidence),
        transform=transform,
        time=table.times,
        at_risk=table.at_risk[:, 0],
        events=table.events[:, 0],
        censored=table.censored[:, 0],
        survival=survival,
        std_err=std_err,
        lower=lower,
        upper=upper,
        greenwood=greenwood,
        entry=None if table.entries is None else table.entries[0],
    )


def kaplan_meier(
    time, event, *, entry=None, confidence: float = 0.95, transform: str = "log-log", label=None
) -> SurvivalCurve:
    """Kaplan–Meier estimate with Greenwood standard errors and a pointwise interval."""
    table = build_risk_table(time, event, labels=(label,), entry=entry)
    return curve_from_table(table, confidence, transform)


@dataclass(frozen=True)
class CurveSet:
    """The curve for all rows (label None) first, then one per group in category order."""

    curves: tuple[SurvivalCurve, ...]

    def to_frame(self) -> pd.DataFrame:
        return pd.concat([c.to_frame() for c in self.curves], ignore_index=True)

    def to_dict(self) -> dict:
        return {"curves": [c.to_dict() for c in self.curves]}


def frame_columns(frame: pd.DataFrame, *, use_group: bool = True):
    """Time, event, group codes, labels and entry from a prepared frame."""
    group = frame["_group"] if use_group and "_group" in frame.columns else None
    codes, labels = group_codes(group, len(frame), missing_as_extra=True)
    entry = frame["_entry"].to_numpy() if "_entry" in frame.columns else None
    return frame["_time"].to_numpy(), frame["_event"].to_numpy(), codes, labels, entry


def curves_by_group(
    frame: pd.DataFrame, *, confidence: float = 0.95, transform: str = "log-log"
) -> CurveSet:
    """Kaplan–Meier for all rows, then for each group of a prepared frame (one sort in all).

    Rows without a group value count in the all-rows curve and in no group curve."""
    time, event, codes, labels, entry = frame_columns(frame)
    table = build_risk_table(time, event, codes, labels, entry)
    curves = [curve_from_table(table.pooled(None), confidence, transform)]
    if "_group" in frame.columns:
        curves += [
            curve_from_table(table.column(g), confidence, transform) for g in range(len(labels))
        ]
    return CurveSet(tuple(curves))


def _with_group(frame: pd.DataFrame, label: object) -> pd.DataFrame:
    """A copy of a per-curve table with the curve's label as its first column, ``group``."""
    out = frame.copy()
    out.insert(0, "group", [label] * len(out))
    return out


@dataclass(frozen=True)
class SurvivalAtTable:
    """Survival at chosen times. ``at_risk`` counts the subjects at risk at t: time >= t, and
    with delayed entry also entry < t; events and censorings are those strictly before t."""

    label: object
    confidence: float
    transform: str
    frame: pd.DataFrame  # time, survival, lower, upper, at_risk, events_before, censored_before

    def to_frame(self) -> pd.DataFrame:
        return _with_group(self.frame, self.label)

    def to_dict(self) -> dict:
        return {
            "group": json_label(self.label),
            "confidence": self.confidence,
            "transform": self.transform,
            "at_times": [
                {
                    "time": json_float(r.time),
                    "survival": json_float(r.survival),
                    "lower": json_float(r.lower),
                    "upper": json_float(r.upper),
                    "at_risk": json_int(r.at_risk),
                    "events_before": json_int(r.events_before),
                    "censored_before": json_int(r.censored_before),
                }
                for r in self.frame.itertuples(index=False)
            ],
        }


def check_times(times, what: str = "times") -> np.ndarray:
    arr = np.atleast_1d(np.asarray(times, dtype=float))
    if arr.size and (~np.isfinite(arr) | (arr < 0)).any():
        raise AnalysisError(f"The {what} must be finite numbers >= 0; got {arr.tolist()}.")
    return arr


def survival_at(curve: SurvivalCurve, times) -> SurvivalAtTable:
    """S(t) and its interval at each requested time; None beyond the last observed time
    unless the curve has already reached 0 (the estimate is undefined past follow-up)."""
    t = check_times(times)
    last = np.searchsorted(curve.time, t, side="right") - 1  # last observed time <= t
    before = np.searchsorted(curve.time, t, side="left")  # first observed time >= t
    started = last >= 0
    idx = np.maximum(last, 0)
    survival = np.where(started, curve.survival[idx], 1.0)
    lower = np.where(started, curve.lower[idx], 1.0)
    upper = np.where(started, curve.upper[idx], 1.0)
    if curve.time.size:
        beyond = (t > curve.time[-1]) & (curve.survival[-1] > 0)
        survival = np.where(beyond, np.nan, survival)
        lower = np.where(beyond, np.nan, lower)
        upper = np.where(beyond, np.nan, upper)
    at_risk = at_risk_at(curve.time, curve.at_risk, t, curve.entry)
    cum_events = np.concatenate(([0], np.cumsum(curve.events)))
    cum_censored = np.concatenate(([0], np.cumsum(curve.censored)))
    frame = pd.DataFrame(
        {
            "time": t,
            "survival": survival,
            "lower": lower,
            "upper": upper,
            "at_risk": at_risk,
            "events_before": cum_events[before],
            "censored_before": cum_censored[before],
        }
    )
    return SurvivalAtTable(curve.label, curve.confidence, curve.transform, frame)


MEDIAN_RULE = (
    "Where the curve stays exactly at that share over an interval (S(t) = 0.5 from one event "
    "time to the next, for the median), the estimate is the start of that interval, the first "
    "time S(t) ≤ 0.5; other common rules take the end of the interval or its midpoint."
)
MEDIAN_FOOTNOTE = "The median is the first time the curve falls to or below one half. " + (
    MEDIAN_RULE
)
QUANTILE_METHOD = (
    "A quantile (the median: half) is the first time the curve falls to or below the share "
    "still free of the event that defines it. "
    + MEDIAN_RULE
    + " Its interval is read from the pointwise "
    "{transform} band: from the first time the lower edge of the band falls that low to the "
    "first time the upper edge does (the Brookmeyer–Crowley construction on that scale)."
)


def _first_at_or_below(times: np.ndarray, values: np.ndarray, level: float) -> float | None:
    hit = np.flatnonzero(values <= level + 1e-12)
    return float(times[hit[0]]) if hit.size else None


@dataclass(frozen=True)
class QuantileTable:
    """Survival quantiles with intervals; a None estimate or limit comes with a reason."""

    label: object
    confidence: float
    method: str
    frame: pd.DataFrame  # prob, estimate, lower, upper, reason

    def row(self, prob: float) -> dict:
        match = self.frame[np.isclose(self.frame["prob"], prob)]
        if match.empty:
            raise AnalysisError(f"The quantile {prob} was not computed; ask for it in probs.")
        r = match.iloc[0]
        return {
            "estimate": json_float(r["estimate"]),
            "lower": json_float(r["lower"]),
            "upper": json_float(r["upper"]),
            "reason": r["reason"],
        }

    def to_frame(self) -> pd.DataFrame:
        return _with_group(self.frame, self.label)

    def to_dict(self) -> dict:
        return {
            "group": json_label(self.label),
            "confidence": self.confidence,
            "method": self.method,
            "quantiles": [{"prob": float(p), **self.row(p)} for p in self.frame["prob"]],
        }


def survival_quantiles(curve: SurvivalCurve, probs=(0.25, 0.5, 0.75)) -> QuantileTable:
    """Time by which a fraction p has had the event (p = 0.5: the median), with its interval.

    The interval inverts the pointwise confidence band of the curve's own transform; see
    ``QUANTILE_METHOD``. "Not reached" gives a None estimate or limit and a reason string.
    """
    probs = np.atleast_1d(np.asarray(probs, dtype=float))
    if ((probs <= 0) | (probs >= 1)).any():
        raise AnalysisError(
            f"Quantile probabilities must be between 0 and 1; got {probs.tolist()}."
        )
    with np.errstate(invalid="ignore"):
        # where S = 0 the band is not estimable, but it has certainly fallen below any level
        lower_curve = np.where(np.isnan(curve.lower), curve.survival, curve.lower)
        upper_curve = np.where(np.isnan(curve.upper), curve.survival, curve.upper)
    rows = []
    lowest = float(curve.survival[-1]) if curve.survival.size else 1.0
    for p in probs:
        level = 1.0 - p
        estimate = _first_at_or_below(curve.time, curve.survival, level)
        lower = _first_at_or_below(curve.time, lower_curve, level)
        upper = _first_at_or_below(curve.time, upper_curve, level)
        reasons = []
        if estimate is None:
            reasons.append(
                f"not reached: survival stays above {level:g} (lowest estimate {lowest:.3g})"
            )
        if lower is None:
            reasons.append("lower limit not reached")
        if upper is None:
            reasons.append("upper limit not reached: the band's upper curve stays above the level")
        rows.append((p, estimate, lower, upper, "; ".join(reasons) or None))
    frame = pd.DataFrame(rows, columns=["prob", "estimate", "lower", "upper", "reason"])
    for col in ("estimate", "lower", "upper"):
        frame[col] = frame[col].astype(float)
    method = QUANTILE_METHOD.format(transform=curve.transform)
    return QuantileTable(curve.label, curve.confidence, method, frame)


@dataclass(frozen=True)
class CumulativeHazardCurve:
    """Nelson–Aalen cumulative hazard H(t) = sum d_j / n_j with variance sum d_j (n_j - d_j) / n_j³
    and a log-scale interval H·exp(±z·se/H)."""

    label: object
    n: int
    confidence: float
    time: np.ndarray
    at_risk: np.ndarray
    events: np.ndarray
    cumulative_hazard: np.ndarray
    std_err: np.ndarray
    lower: np.ndarray
    upper: np.ndarray

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame(
            {
                "group": [self.label] * len(self.time),
                "time": self.time,
                "at_risk": self.at_risk,
                "events": self.events,
                "cumulative_hazard": self.cumulative_hazard,
                "std_err": self.std_err,
                "lower": self.lower,
                "upper": self.upper,
            }
        )

    def to_dict(self) -> dict:
        frame = self.to_frame().drop(columns="group")
        return {
            "group": json_label(self.label),
            "n": self.n,
            "confidence": self.confidence,
            "points": [
                {k: (json_float(v) if k not in ("at_risk", "events") else int(v)) for k, v in r}
                for r in (row.items() for row in frame.to_dict("records"))
            ],
        }


def nelson_aalen(
    time, event, *, entry=None, confidence: float = 0.95, label=None
) -> CumulativeHazardCurve:
    """Nelson–Aalen estimate of the cumulative hazard with a log-transformed interval."""
    z = z_value(confidence)
    table = build_risk_table(time, event, labels=(label,), entry=entry)
    n_risk = table.at_risk[:, 0].astype(float)
    d = table.events[:, 0].astype(float)
    hazard = np.cumsum(d / n_risk)
    std_err = np.sqrt(np.cumsum(d * (n_risk - d) / n_risk**3))
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(hazard > 0, np.exp(z * std_err / hazard), 1.0)
    return CumulativeHazardCurve(
        label=label,
        n=int(table.events.sum() + table.censored.sum()),
        confidence=float(confidence),
        time=table.times,
        at_risk=table.at_risk[:, 0],
        events=table.events[:, 0],
        cumulative_hazard=hazard,
        std_err=std_err,
        lower=hazard / factor,
        upper=hazard * factor,
    )


@dataclass(frozen=True)
class FollowUpResult:
    """Median follow-up by reverse Kaplan–Meier (censoring treated as the event)."""

    estimate: float | None
    lower: float | None
    upper: float | None
    confidence: float
    reason: str | None
    method: str = "reverse Kaplan–Meier: median of the censoring-time distribution"

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([self.to_dict()])

    def to_dict(self) -> dict:
        return {
            "estimate": json_float(self.estimate),
            "lower": json_float(self.lower),
            "upper": json_float(self.upper),
            "confidence": self.confidence,
            "reason": self.reason,
            "method": self.method,
        }


def median_follow_up(time, event, *, confidence: float = 0.95) -> FollowUpResult:
    """Median potential follow-up: events count as censored and censorings as 'events'."""
    reverse = ~as_event_array(event, len(np.asarray(time)))
    curve = kaplan_meier(time, reverse, confidence=confidence)
    row = survival_quantiles(curve, (0.5,)).row(0.5)
    return FollowUpResult(
        row["estimate"], row["lower"], row["upper"], float(confidence), row["reason"]
    )
