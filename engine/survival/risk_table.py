"""Counts of subjects at risk, events and censorings at each distinct time, per group.

Every estimator and test in `curves`, `rmst` and `compare` starts from these counts, built here
once with a single sort and `bincount`s (no per-row Python loops), so a million rows cost a few
array passes.

Risk set convention (counting process, delayed entry allowed): a subject is at risk at time t
when ``entry < t <= time``; without entry times this is ``time >= t``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.errors import AnalysisError, NoRowsError, preview_values


@dataclass(frozen=True)
class RiskTable:
    """Counts at each distinct observed time (rows) for each group (columns)."""

    times: np.ndarray  # (T,) distinct observed times, ascending
    at_risk: np.ndarray  # (T, k) int64
    events: np.ndarray  # (T, k) int64
    censored: np.ndarray  # (T, k) int64
    labels: tuple  # group labels (None for a single unlabelled group); a last, unlabelled
    # column, when present, holds rows without a group (they count only in `pooled`)
    entries: tuple | None = None  # with delayed entry: each column's entry times, ascending

    def column(self, g: int) -> RiskTable:
        """One group's counts, keeping only the times at which that group has an observation."""
        keep = (self.events[:, g] + self.censored[:, g]) > 0
        return RiskTable(
            times=self.times[keep],
            at_risk=self.at_risk[keep, g : g + 1],
            events=self.events[keep, g : g + 1],
            censored=self.censored[keep, g : g + 1],
            labels=(self.labels[g],),
            entries=None if self.entries is None else (self.entries[g],),
        )

    def pooled(self, label=None) -> RiskTable:
        """All groups together."""
        return RiskTable(
            times=self.times,
            at_risk=self.at_risk.sum(axis=1, keepdims=True),
            events=self.events.sum(axis=1, keepdims=True),
            censored=self.censored.sum(axis=1, keepdims=True),
            labels=(label,),
            entries=None if self.entries is None else (np.sort(np.concatenate(self.entries)),),
        )


# What the messages call the prepared frame's working columns: a user never named them.
WORKING_NAMES = {
    "_time": "times", "_entry": "entry times", "_event": "event indicators", "_group": "groups",
    "_strata": "strata",
}  # fmt: skip


def _called(name: str) -> str:
    return WORKING_NAMES.get(name, f"values of column {name!r}")


def _same_length(values: np.ndarray | pd.Series, n: int, name: str) -> None:
    if len(values) != n:
        raise AnalysisError(f"There are {len(values)} {_called(name)} but {n} times.")


def as_float_array(values, name: str) -> np.ndarray:
    """Times as a 1-D float array, refusing missing, infinite or negative values."""
    arr = np.asarray(values, dtype=np.float64).reshape(-1)
    bad = ~np.isfinite(arr) | (arr < 0)
    if bad.any():
        raise AnalysisError(
            f"The {_called(name)} must be finite and at least 0; found "
            f"{preview_values(arr[bad])}. Exclude or correct those rows before the analysis."
        )
    return arr


def checked_entry(entry, time: np.ndarray) -> np.ndarray:
    """Entry times as floats, one per row and each earlier than its exit time; −inf means at
    risk from the start (the first episode of follow-up split at times, ``split_at_times``),
    which differs from 0 only for a row at time 0."""
    entry = np.asarray(entry, dtype=np.float64).reshape(-1)
    _same_length(entry, time.shape[0], "_entry")
    from_start = entry == -np.inf
    entry = np.where(from_start, -np.inf, as_float_array(np.where(from_start, 0, entry), "_entry"))
    late = entry >= time
    if late.any():
        raise AnalysisError(
            f"Entry times must be earlier than exit times; {int(late.sum())} rows are not "
            f"(entry values {preview_values(entry[late])}). Correct or exclude those rows."
        )
    return entry


def as_event_array(values, n: int) -> np.ndarray:
    """Event indicators as a bool array, refusing anything but 0/1."""
    arr = np.asarray(values).reshape(-1)
    _same_length(arr, n, "_event")
    if arr.dtype == bool:
        return arr
    numeric = np.asarray(arr, dtype=np.float64)
    bad = ~np.isin(numeric, (0.0, 1.0))
    if bad.any():
        raise AnalysisError(
            f"Event indicators must be 0 (censored) or 1 (event); found "
            f"{preview_values(arr[bad])}. Map the event coding before the analysis."
        )
    return numeric == 1.0


def group_codes(
    group, n: int, *, name: str = "_group", missing_as_extra: bool = False
) -> tuple[np.ndarray, tuple]:
    """Integer codes and labels of a grouping, in category order for a Categorical.

    Missing values are refused unless ``missing_as_extra``: then they get the code
    ``len(labels)`` (one past the last label), so pooled counts keep those rows while no group
    curve or test includes them.
    """
    if group is None:
        return np.zeros(n, dtype=np.intp), (None,)
    series = group if isinstance(group, pd.Series) else pd.Series(group)
    _same_length(series, n, name)
    if isinstance(series.dtype, pd.CategoricalDtype):
        cat = series.cat.remove_unused_categories()
    else:
        cat = series.astype("category")
    codes = np.asarray(cat.cat.codes, dtype=np.intp)
    labels = tuple(cat.cat.categories.tolist())
    missing = codes < 0
    if missing.any():
        if not missing_as_extra:
            raise AnalysisError(
                f"Column {name!r} has {int(missing.sum())} missing values. "
                "Drop those rows or give them a value before this analysis."
            )
        codes = np.where(missing, len(labels), codes)
    return codes, labels


def without_missing(frame: pd.DataFrame, columns=("_group", "_strata")) -> tuple[pd.DataFrame, int]:
    """The rows of a prepared frame with a value in each of the given columns, and how many
    rows were left out (rows without a group count in overall results but in no group)."""
    present = [c for c in columns if c in frame.columns]
    if not present:
        return frame, 0
    keep = frame[present].notna().all(axis=1).to_numpy()
    return (frame, 0) if keep.all() else (frame[keep], int((~keep).sum()))


def at_risk_at(times, at_risk, t, entries=None) -> np.ndarray:
    """The subjects at risk at each time ``t`` (``entry < t <= time``), read from the counts at
    the distinct observed ``times``: the count at the first observed time s >= t, less those
    entering in [t, s) (``entries``: the rows' entry times, ascending); 0 beyond the last time.
    The one rule for numbers at risk at chosen times (curves and cumulative incidence)."""
    times = np.asarray(times, dtype=float)
    t = np.asarray(t, dtype=float)
    first_after = np.searchsorted(times, t, side="left")  # first observed time >= t
    out = np.append(np.asarray(at_risk, dtype=np.int64), 0)[first_after]
    if entries is not None:
        next_time = np.append(times, np.inf)[first_after]
        out = out - (
            np.searchsorted(entries, next_time, side="left")
            - np.searchsorted(entries, t, side="left")
        )
    return out


def build_risk_table(time, event, codes=None, labels=(None,), entry=None) -> RiskTable:
    """Count at risk / events / censored at each distinct time for each group code."""
    time = as_float_array(time, "_time")
    n = time.shape[0]
    if n == 0:
        raise NoRowsError()
    is_event = as_event_array(event, n)
    k = len(labels)
    if codes is not None and codes.size and codes.max() >= k:
        k += 1  # rows without a group: counted in the pooled table, shown in no group
    if codes is None:
        codes = np.zeros(n, dtype=np.intp)
    times = np.unique(time)  # sorts a copy once
    key = np.searchsorted(times, time)
    if k > 1:
        key *= k
        key += codes
    n_cells = times.shape[0] * k
    all_obs = np.bincount(key, minlength=n_cells).reshape(-1, k)
    events = np.bincount(key[is_event], minlength=n_cells).reshape(-1, k)
    del key
    censored = all_obs - events
    # number with time >= t: reverse cumulative sum of everything observed at or after t
    at_risk = np.cumsum(all_obs[::-1], axis=0)[::-1]
    if entry is not None:
        entry = checked_entry(entry, time)
        # subtract those who have not entered yet: entry >= t, i.e. distinct times t_j <= entry
        entered_after = np.searchsorted(times, entry, side="right")  # count of t_j <= entry
        counts = np.bincount(entered_after * k + codes, minlength=(times.shape[0] + 1) * k)
        counts = counts.reshape(-1, k)
        # subjects with entered_after > j are not yet at risk at t_j
        not_yet = np.cumsum(counts[::-1], axis=0)[::-1][1:]
        at_risk = at_risk - not_yet
        entries = tuple(np.sort(entry[codes == g]) for g in range(k))
    return RiskTable(
        times=times,
        at_risk=np.ascontiguousarray(at_risk),
        events=events,
        censored=censored,
        labels=tuple(labels),
        entries=None if entry is None else entries,
    )
