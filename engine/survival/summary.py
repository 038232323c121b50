"""Tables for display and export: numbers at risk, the group summary and the CLI's JSON entries."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.errors import AnalysisError
from engine.json_values import json_float, json_int, json_label
from engine.survival.compare import compare_frame
from engine.survival.curves import (
    check_times,
    curves_by_group,
    survival_at,
    survival_quantiles,
)
from engine.survival.risk_table import as_event_array, as_float_array, group_codes
from engine.survival.rmst import rmst_from_curve
from engine.survival.rmst import rmst_origin as rmst_origin_of


@dataclass(frozen=True)
class NumbersAtRiskTable:
    """Per group and tick: at risk at the tick (time >= tick; with delayed entry also
    entry < tick), and events and censorings in [tick, next tick) (the last to the end). Rows
    without a group are in no group's rows (the all-rows table, without a grouping, has them)."""

    frame: pd.DataFrame  # group, tick, interval_end, at_risk, events, censored

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def to_dict(self) -> dict:
        return {
            "rows": [
                {
                    "group": json_label(r.group),
                    "tick": json_float(r.tick),
                    "interval_end": json_float(r.interval_end),
                    "at_risk": int(r.at_risk),
                    "events": int(r.events),
                    "censored": int(r.censored),
                }
                for r in self.frame.itertuples(index=False)
            ]
        }


def numbers_at_risk(time, event, group=None, ticks=(0.0,), *, entry=None) -> NumbersAtRiskTable:
    """Numbers at risk at each tick for each group in category order (one pass with bincount)."""
    time = as_float_array(time, "_time")
    is_event = as_event_array(event, time.shape[0])
    ticks = check_times(ticks, "ticks")
    if ticks.size == 0 or np.any(np.diff(ticks) <= 0):
        raise AnalysisError(f"Ticks must be increasing and non-empty; got {ticks.tolist()}.")
    # Rows without a group get the code one past the last label: counted in no group's row.
    codes, labels = group_codes(group, time.shape[0], missing_as_extra=True)
    k, m = len(labels) + 1, ticks.size
    key = (np.searchsorted(ticks, time, side="right") * k + codes).astype(np.intp)
    cells = (m + 1) * k
    everyone = np.bincount(key, minlength=cells).reshape(m + 1, k)
    events = np.bincount(key[is_event], minlength=cells).reshape(m + 1, k)
    at_risk = np.cumsum(everyone[::-1], axis=0)[::-1][1:]
    if entry is not None:
        entry = as_float_array(entry, "_entry")
        entry_key = np.searchsorted(ticks, entry, side="right") * k + codes
        late = np.bincount(entry_key, minlength=cells).reshape(m + 1, k)
        at_risk = at_risk - np.cumsum(late[::-1], axis=0)[::-1][1:]
    k = len(labels)
    return at_risk_table(labels, ticks, everyone[:, :k], events[:, :k], at_risk[:, :k])


def at_risk_table(labels, ticks, everyone, events, at_risk) -> NumbersAtRiskTable:
    """The table from per-(interval, group) counts: ``everyone`` and ``events`` leaving in each
    interval [tick, next tick) (row 0: before the first tick) and ``at_risk`` at each tick
    (from rows or from per-time counts alike)."""
    k, m = len(labels), len(ticks)
    frame = pd.DataFrame(
        {
            "group": np.repeat(np.array(labels, dtype=object), m),
            "tick": np.tile(ticks, k),
            "interval_end": np.tile(np.append(ticks[1:], np.nan), k),
            "at_risk": at_risk.T.reshape(-1),
            "events": events[1:].T.reshape(-1),
            "censored": (everyone[1:] - events[1:]).T.reshape(-1),
        }
    )
    return NumbersAtRiskTable(frame)


def numbers_at_risk_frame(
    frame: pd.DataFrame, ticks=(0.0,), *, by_group: bool = True
) -> NumbersAtRiskTable:
    """`numbers_at_risk` on a prepared frame: per group when asked and it has `_group`, with
    delayed entry when it has `_entry`."""
    return numbers_at_risk(
        frame["_time"].to_numpy(),
        frame["_event"].to_numpy(),
        frame["_group"] if by_group and "_group" in frame.columns else None,
        ticks,
        entry=frame["_entry"].to_numpy() if "_entry" in frame.columns else None,
    )


@dataclass(frozen=True)
class GroupSummaryTable:
    """One row per group (all rows first): n, events, censored, median with its interval,
    survival at the chosen times with intervals, and RMST to τ."""

    frame: pd.DataFrame
    times: tuple[float, ...]
    tau: float | None
    tau_rule: str | None
    confidence: float
    transform: str
    quantile_method: str
    rmst_origin: float = 0.0  # where the restricted means start (``rmst.rmst_origin``)
    rmst_origin_rule: str | None = None  # the sentence saying so, with delayed entry

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def to_dict(self) -> dict:
        rows = [
            {k: _summary_value(k, v) for k, v in r.items()} for r in self.frame.to_dict("records")
        ]
        return {
            "times": list(self.times),
            "tau": self.tau,
            "tau_rule": self.tau_rule,
            "confidence": self.confidence,
            "transform": self.transform,
            "quantile_method": self.quantile_method,
            "rmst_origin": self.rmst_origin,
            "rmst_origin_rule": self.rmst_origin_rule,
            "rows": rows,
        }


def _summary_value(column: str, value):
    if column == "group":
        return json_label(value)
    if column == "median_reason":
        return value
    if column in ("n", "events", "censored"):
        return json_int(value)
    return json_float(value)


def group_summary(
    frame: pd.DataFrame,
    times=(),
    tau: float | None = None,
    confidence: float = 0.95,
    transform: str = "log-log",
    rmst_origin: str = "zero",
) -> GroupSummaryTable:
    """The summary table of a prepared frame; τ defaults to the smallest of the groups'
    largest observed times (the overall row uses the same τ); the restricted means start at
    ``rmst_origin`` ("zero", or "first_entry": the first entry of all rows)."""
    times = tuple(float(t) for t in check_times(times))
    curves = curves_by_group(frame, confidence=confidence, transform=transform).curves
    groups = curves[1:] or curves
    if tau is None:
        last = min(groups, key=lambda c: c.time[-1])
        tau = float(last.time[-1])
        rule = "the smallest of the groups' largest observed times"
    else:
        rule = "chosen by the user"
    origin, origin_rule = rmst_origin_of(curves[0], rmst_origin)
    rows, method = [], ""
    for curve in curves:
        quantiles = survival_quantiles(curve, (0.5,))
        method = quantiles.method
        median = quantiles.row(0.5)
        row = {
            "group": curve.label,
            "n": curve.n,
            "events": curve.total_events,
            "censored": curve.total_censored,
            "median": median["estimate"],
            "median_lower": median["lower"],
            "median_upper": median["upper"],
            "median_reason": median["reason"],
        }
        at = survival_at(curve, times).frame
        for t, s, lo, hi in zip(at["time"], at["survival"], at["lower"], at["upper"], strict=True):
            row[f"survival_{t:g}"] = s
            row[f"survival_{t:g}_lower"] = lo
            row[f"survival_{t:g}_upper"] = hi
        estimate = rmst_from_curve(curve, tau, origin)
        row.update(rmst=estimate.estimate, rmst_lower=estimate.lower, rmst_upper=estimate.upper)
        rows.append(row)
    table = pd.DataFrame(rows)
    for col in ("median", "median_lower", "median_upper"):
        table[col] = table[col].astype(float)
    return GroupSummaryTable(
        table, times, float(tau), rule, confidence, transform, method, origin, origin_rule
    )


def curves_json(
    frame: pd.DataFrame,
    times=(),
    confidence: float = 0.95,
    transform: str = "log-log",
    rmst_horizon: float | None = None,
    rmst_origin: str = "zero",
) -> list[dict]:
    """The CLI's "curves" entry: all rows first ("group": null), then each group."""
    curve_set = curves_by_group(frame, confidence=confidence, transform=transform)
    return curve_set_json(curve_set, times, rmst_horizon, rmst_origin)


def curve_set_json(
    curve_set, times=(), rmst_horizon: float | None = None, rmst_origin: str = "zero"
) -> list[dict]:
    """The "curves" entry of a ``CurveSet`` (from rows or from per-time counts); with
    ``rmst_horizon`` each curve has its restricted mean to that τ from ``rmst_origin`` (the
    first entry of all rows with "first_entry"), or the reason it has none."""
    times = check_times(times)
    out = []
    start = None if rmst_horizon is None else rmst_origin_of(curve_set.curves[0], rmst_origin)
    for curve in curve_set.curves:
        median = survival_quantiles(curve, (0.5,)).row(0.5)
        at = survival_at(curve, times).to_dict()["at_times"]
        out.append(
            {
                "group": json_label(curve.label),
                "n": curve.n,
                "events": curve.total_events,
                "median": {k: median[k] for k in ("estimate", "lower", "upper")},
                "at_times": [
                    {k: p[k] for k in ("time", "survival", "lower", "upper", "at_risk")} for p in at
                ],
            }
        )
        if start is not None:
            out[-1]["rmst"] = _rmst_json(curve, float(rmst_horizon), *start)
    return out


def _rmst_json(curve, tau: float, origin: float, origin_rule: str | None) -> dict:
    """One curve's "rmst" entry: τ, the origin and the sentence on it, the estimate and its
    interval; a τ the curve does not reach gives the reason instead."""
    try:
        estimate = rmst_from_curve(curve, tau, origin)
    except AnalysisError as exc:
        return {"not_computed": str(exc)}
    values = estimate.to_dict()
    return {
        "tau": tau,
        "origin": origin,
        "origin_rule": origin_rule,
        **{k: values[k] for k in ("estimate", "std_err", "lower", "upper")},
    }


# The JSON "comparison" object's keys; rows_excluded counts rows without a group or stratum,
# which are in the all-rows curve but not in the comparison.
COMPARISON_KEYS = ("test", "statistic", "df", "p_value", "rows_excluded")


def comparison_json(frame: pd.DataFrame, test: str = "logrank") -> dict | None:
    """The CLI's "comparison" entry, or None without a group column or with one group only."""
    if "_group" not in frame.columns or frame["_group"].nunique(dropna=True) < 2:
        return None
    result = compare_frame(frame, test=test).to_dict()
    return {k: result[k] for k in COMPARISON_KEYS}
