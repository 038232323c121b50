"""Counts per (group, stratum, distinct time): the sufficient statistics of the curves and tests.

Kaplan–Meier, Nelson–Aalen, survival at times, quantiles, numbers at risk, RMST and the whole
weighted log-rank family depend on the rows only through, per group and stratum, the events and
censorings at each distinct exit time and the entries at each distinct entry time. A
``CountTable`` holds exactly those; ``risk_table`` turns a selection of it into the
``engine.survival.risk_table.RiskTable`` that the row-level estimators already take, with the same
integers ``build_risk_table`` would count from the rows (the tests check this to the unit).

Group and stratum are integer codes into ``group_labels`` / ``strata_labels`` (-1: missing).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.errors import NoRowsError
from engine.survival.risk_table import RiskTable

EXIT_COLUMNS = ("group", "stratum", "time", "events", "censored", "competing")
ENTRY_COLUMNS = ("group", "stratum", "entry", "rows")
CAUSE_COLUMNS = ("group", "stratum", "time", "cause", "events")


@dataclass(frozen=True)
class CountTable:
    """Exits per (group, stratum, time) and entries per (group, stratum, entry time); with
    named causes, the events of each cause per (group, stratum, time) as well."""

    exits: pd.DataFrame  # EXIT_COLUMNS; codes int64, time float64, counts int64
    entries: pd.DataFrame | None  # ENTRY_COLUMNS, or None without delayed entry
    group_labels: tuple | None  # None: no group role
    strata_labels: tuple | None  # None: no strata role
    # named causes in the order given (``Roles.cause_order``); ``cause`` codes into them.
    # ``censored`` includes the rows of competing causes, counted again in ``competing``.
    causes: tuple[str, ...] | None = None
    cause_exits: pd.DataFrame | None = None  # CAUSE_COLUMNS

    @property
    def competing(self) -> int:
        return int(self.exits["competing"].sum())

    @property
    def rows(self) -> int:
        return int(self.exits["events"].sum() + self.exits["censored"].sum())

    @property
    def events(self) -> int:
        return int(self.exits["events"].sum())

    def to_frame(self) -> pd.DataFrame:
        return self.exits.copy()

    def to_dict(self) -> dict:
        return {
            "exit_cells": len(self.exits),
            "entry_cells": 0 if self.entries is None else len(self.entries),
            "rows": self.rows,
            "events": self.events,
        }


def count_table(
    exits: pd.DataFrame, entries, group_labels, strata_labels, *, causes=None
) -> CountTable:
    """A ``CountTable`` from aggregated rows (cells may repeat; they are summed here). With
    ``causes`` (names), ``exits`` has a ``cause`` column: a name, or None for censored rows."""
    keys = ["group", "stratum", "time"]
    cause_exits = None
    if causes is None:
        exits = exits.assign(competing=0)
    else:
        causes = tuple(causes)
        named = exits["cause"].notna().to_numpy()
        exits = exits.assign(competing=np.where(named, exits["censored"], 0))
        code = {name: i for i, name in enumerate(causes)}
        cells = exits[named]
        cells = cells.assign(
            cause=np.array([code[str(c)] for c in cells["cause"]], dtype=np.int64),
            events=cells["events"] + cells["censored"],
        )
        cause_exits = _summed(cells[list(CAUSE_COLUMNS)], [*keys, "cause"], ["events"])
    exits = _summed(exits, keys, ["events", "censored", "competing"])
    if entries is not None:
        entries = _summed(entries, ["group", "stratum", "entry"], ["rows"])
    labels = None if group_labels is None else tuple(group_labels)
    strata = None if strata_labels is None else tuple(strata_labels)
    return CountTable(exits, entries, labels, strata, causes, cause_exits)


def _summed(frame: pd.DataFrame, keys: list[str], values: list[str]) -> pd.DataFrame:
    codes = [k for k in keys if k != keys[2]]
    frame = frame.astype({k: np.int64 for k in codes} | {v: np.int64 for v in values})
    frame = frame.astype({keys[2]: np.float64})
    out = frame.groupby(keys, sort=True, as_index=False)[values].sum()
    return out.reset_index(drop=True)


def codes_of(values, labels_from: pd.Series | None = None) -> tuple[np.ndarray, tuple | None]:
    """Integer codes (-1 missing) and labels of a prepared Categorical column, or zeros."""
    if values is None:
        return None, None
    cat = values if isinstance(values.dtype, pd.CategoricalDtype) else values.astype("category")
    return np.asarray(cat.cat.codes, dtype=np.int64), tuple(cat.cat.categories.tolist())


def counts_from_arrays(time, event, group=None, strata=None, entry=None) -> CountTable:
    """The memory backend: aggregate arrays of a prepared frame (one groupby per table)."""
    time = np.asarray(time, dtype=np.float64)
    event = np.asarray(event).astype(np.int64)
    n = len(time)
    g, g_labels = codes_of(group)
    s, s_labels = codes_of(strata)
    g = np.zeros(n, np.int64) if g is None else g
    s = np.zeros(n, np.int64) if s is None else s
    exits = pd.DataFrame({"group": g, "stratum": s, "time": time, "events": event})
    exits["censored"] = 1 - event
    entries = None
    if entry is not None:
        entries = pd.DataFrame(
            {"group": g, "stratum": s, "entry": np.asarray(entry, float), "rows": 1}
        )
    return count_table(exits, entries, g_labels, s_labels)


def counts_from_frame(frame: pd.DataFrame) -> CountTable:
    """`counts_from_arrays` on a prepared frame (``_group``, ``_strata``, ``_entry`` if present)."""
    return counts_from_arrays(
        frame["_time"].to_numpy(),
        frame["_event"].to_numpy(),
        frame["_group"] if "_group" in frame.columns else None,
        frame["_strata"] if "_strata" in frame.columns else None,
        frame["_entry"].to_numpy() if "_entry" in frame.columns else None,
    )


def _present_labels(codes: np.ndarray, labels: tuple) -> tuple[np.ndarray, tuple]:
    """Renumber codes over the labels that occur (as ``remove_unused_categories`` does)."""
    present = np.unique(codes[codes >= 0])
    remap = np.full(len(labels) + 1, -1, dtype=np.int64)
    remap[present] = np.arange(len(present))
    return np.where(codes >= 0, remap[codes], -1), tuple(labels[i] for i in present)


def risk_table(
    counts: CountTable,
    *,
    by_group: bool = True,
    stratum: int | None = None,
    groups: tuple[int, ...] | None = None,
    complete: bool = False,
) -> RiskTable:
    """The risk table of a selection: one stratum (code) or all; with ``groups`` (group codes)
    exactly those groups as its columns, in that order; with ``complete`` the cells without a
    group or stratum are left out, otherwise cells without a group count in an extra, unlabelled
    last column (as ``build_risk_table`` does for rows). Without ``groups`` the columns are the
    groups that occur in the selection."""
    ex, en = counts.exits, counts.entries
    keep = np.ones(len(ex), dtype=bool)
    keep_en = None if en is None else np.ones(len(en), dtype=bool)
    if stratum is not None:
        keep &= ex["stratum"].to_numpy() == stratum
        if en is not None:
            keep_en &= en["stratum"].to_numpy() == stratum
    if complete:
        keep &= (ex["group"].to_numpy() >= 0) & (ex["stratum"].to_numpy() >= 0)
        if en is not None:
            keep_en &= (en["group"].to_numpy() >= 0) & (en["stratum"].to_numpy() >= 0)
    if groups is not None:
        keep &= np.isin(ex["group"].to_numpy(), groups)
        if en is not None:
            keep_en &= np.isin(en["group"].to_numpy(), groups)
    ex = ex[keep]
    if len(ex) == 0 or (ex["events"].sum() + ex["censored"].sum()) == 0:
        raise NoRowsError()
    use_group = by_group and counts.group_labels is not None
    if use_group and groups is not None:
        codes = _positions(ex["group"].to_numpy(), groups, len(counts.group_labels))
        labels = tuple(counts.group_labels[g] for g in groups)
    elif use_group:
        codes, labels = _present_labels(ex["group"].to_numpy(), counts.group_labels)
    else:
        codes, labels = np.zeros(len(ex), np.int64), (None,)
    k = len(labels)
    extra = bool((codes < 0).any())
    if extra:
        codes = np.where(codes < 0, k, codes)
        k += 1
    times = np.unique(ex["time"].to_numpy())
    key = np.searchsorted(times, ex["time"].to_numpy()) * k + codes
    cells = len(times) * k
    events = _count(key, ex["events"].to_numpy(), cells).reshape(-1, k)
    exits = _count(key, ex["events"].to_numpy() + ex["censored"].to_numpy(), cells)
    exits = exits.reshape(-1, k)
    at_risk = np.cumsum(exits[::-1], axis=0)[::-1]
    if en is not None:
        en = en[keep_en]
        if use_group and groups is not None:
            en_codes = _positions(en["group"].to_numpy(), groups, len(counts.group_labels))
        elif use_group:
            en_codes = _renumbered(en["group"].to_numpy(), counts.group_labels, labels)
            en_codes = np.where(en_codes < 0, k - 1, en_codes) if extra else en_codes
        else:
            en_codes = np.zeros(len(en), np.int64)
        after = np.searchsorted(times, en["entry"].to_numpy(), side="right")
        late = _count(after * k + en_codes, en["rows"].to_numpy(), (len(times) + 1) * k)
        not_yet = np.cumsum(late.reshape(-1, k)[::-1], axis=0)[::-1][1:]
        at_risk = at_risk - not_yet
        # each column's entry times, one per row (``survival_at`` counts entries before t)
        order = np.argsort(en["entry"].to_numpy(), kind="stable")
        entry_time = en["entry"].to_numpy()[order]
        entry_rows = en["rows"].to_numpy().astype(np.int64)[order]
        entry_codes = en_codes[order]
        entries = tuple(
            np.repeat(entry_time[entry_codes == g], entry_rows[entry_codes == g]) for g in range(k)
        )
    return RiskTable(
        times=times,
        at_risk=np.ascontiguousarray(at_risk),
        events=events,
        censored=exits - events,
        labels=labels,
        entries=None if en is None else entries,
    )


def _renumbered(codes: np.ndarray, all_labels: tuple, present: tuple) -> np.ndarray:
    position = {label: i for i, label in enumerate(present)}
    remap = np.array([position.get(label, -1) for label in all_labels] + [-1], dtype=np.int64)
    return remap[codes]


def _positions(codes: np.ndarray, groups: tuple[int, ...], n_labels: int) -> np.ndarray:
    remap = np.full(n_labels + 1, -1, dtype=np.int64)
    remap[list(groups)] = np.arange(len(groups))
    return remap[codes]


def _count(key: np.ndarray, weights: np.ndarray, cells: int) -> np.ndarray:
    """Integer sums of integer weights per key (bincount's float sums are exact below 2**53)."""
    return np.rint(np.bincount(key, weights.astype(np.float64), cells)).astype(np.int64)


def stratum_codes(counts: CountTable, *, complete: bool = True) -> list[int]:
    """The stratum codes that have rows (with ``complete``: rows with a group as well)."""
    ex = counts.exits
    if complete:
        ex = ex[(ex["group"] >= 0) & (ex["stratum"] >= 0)]
    return sorted(int(s) for s in ex["stratum"].unique())
