"""Harrell's C from counts of rows per (stratum, score bin, time, event) and, with delayed
entry, per (stratum, score bin, entry time): the pairs of ``engine.cox.concordance.harrell_c``
counted cell by cell.

An event at t in bin b is compared with every row of its stratum at risk at t (entry < t) that
leaves after t, or at t censored; the pair is concordant when the partner's bin is lower and
counts one half when the bins are equal. When each distinct score is its own bin this is
Harrell's C exactly. With wider bins only the pairs whose two scores share a bin can be ordered
differently from the exact count, each by at most one half, so

    |C_binned - C_exact| <= (same-bin comparable pairs) / (2 * comparable pairs),

the ``error_bound`` reported beside the estimate (0 for exact bins).

The standard error (``harrell_c``'s delta-method one) needs each row's own pair counts; without
delayed entry every row of a cell has the same, so it is computed here; with delayed entry a
row's counts depend on its entry time as well, and it is not computed (NaN).

The work is dense in (distinct time x bin) per stratum, in blocks of times of ``BLOCK_CELLS``
cells at most: memory stays near a few such blocks (16 MB each), time grows with times x bins.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass

import numpy as np

from engine.cox.concordance import ConcordanceResult, concordance_result
from engine.errors import AnalysisError
from engine.json_values import json_float
from engine.sorted_codes import sorted_codes, stable_order

BLOCK_CELLS = 2_000_000  # times x bins per block


@dataclass(frozen=True)
class BinnedConcordance(ConcordanceResult):
    """Harrell's C from score bins: ``bins`` None when each distinct score is its own bin."""

    bins: int | None
    same_bin: float  # comparable pairs whose scores share a bin
    error_bound: float  # |C - exact C| is at most this

    def to_dict(self) -> dict:
        return {
            **super().to_dict(),
            "bins": self.bins,
            "same_bin_pairs": float(self.same_bin),
            "error_bound": json_float(self.error_bound),
        }


def concordance_from_counts(
    exits: Mapping, entries: Mapping | None, n_bins: int, *, exact: bool
) -> BinnedConcordance:
    """C from ``exits`` (columns stratum, bin, time, event 0/1, rows; a DataFrame or a dict of
    arrays) and ``entries`` (stratum, bin, entry, rows) with bins coded 0..n_bins-1 in
    increasing score; ``exact`` when each bin holds a single distinct score."""
    totals = np.zeros(3)  # comparable, concordant (half for same bin), same bin
    cells = []  # per stratum: rows, c_i, p_i per cell, for the standard error
    exits, entries = _columns(exits), None if entries is None else _columns(entries)
    strata = np.unique(exits["stratum"])
    for stratum in strata:
        ex = _rows_of(exits, stratum, len(strata))
        en = None if entries is None else _rows_of(entries, stratum, len(strata))
        part, per_cell = _stratum_pairs(ex, en, n_bins)
        totals += part
        cells.append(per_cell)
    comparable, concordant, same = totals
    if comparable == 0:
        raise AnalysisError(
            "Harrell's concordance needs at least one comparable pair (a subject with an event "
            "and another followed for longer); this data has none. Check the event column."
        )
    c = concordant / comparable
    se = float("nan")
    if entries is None:
        rows, c_i, p_i = (np.concatenate([p[i] for p in cells]) for i in range(3))
        se = float(np.sqrt(np.sum(rows * (c_i - c * p_i) ** 2)) / comparable)
    base = concordance_result(concordant, comparable, same, se)
    return BinnedConcordance(
        **asdict(base),
        bins=None if exact else int(n_bins),
        same_bin=float(same),
        error_bound=0.0 if exact else float(same / (2 * comparable)),
    )


def _columns(cells) -> dict[str, np.ndarray]:
    return {name: np.asarray(cells[name]) for name in cells}


def _rows_of(cells: dict, stratum, n_strata: int) -> dict:
    if n_strata == 1:
        return cells
    keep = cells["stratum"] == stratum
    return {name: values[keep] for name, values in cells.items()}


def _stratum_pairs(ex: dict, en: dict | None, n_bins: int):
    """Pair totals (comparable, concordant, same bin) of one stratum and, without entry times,
    each cell's rows, c_i and p_i. Blocks of times are swept from the last time back (the
    partners of each event: later exits, censored at its time, less those not yet entered)
    and, for the standard error, from the first forward (the earlier events of each row)."""
    times, t_index = sorted_codes(np.asarray(ex["time"], float))
    m = len(times)
    order = stable_order(t_index, m)
    t_index = t_index[order]
    b = np.asarray(ex["bin"], np.int64)[order]
    rows = np.asarray(ex["rows"], float)[order]
    event = np.asarray(ex["event"])[order] == 1
    if en is not None:
        # rows entering at or after times[i] are not at risk there: k = number of times <= entry
        k = np.searchsorted(times, np.asarray(en["entry"], float), side="right")
        k_order = stable_order(k, m + 1)
        k, k_bin = k[k_order], np.asarray(en["bin"], np.int64)[k_order]
        k_rows = np.asarray(en["rows"], float)[k_order]
    step = max(1, BLOCK_CELLS // max(n_bins, 1))

    def block(lo, hi):
        """Dense exits and events of times lo..hi-1 and the cells in them."""
        first, last = np.searchsorted(t_index, [lo, hi])
        cells = slice(first, last)
        flat = (t_index[cells] - lo) * n_bins + b[cells]
        size = (hi - lo) * n_bins
        exits = np.bincount(flat, rows[cells], size).reshape(hi - lo, n_bins)
        hit = event[cells]
        events = np.bincount(flat[hit], rows[cells][hit], size).reshape(hi - lo, n_bins)
        return cells, flat, exits, events

    totals = np.zeros(3)
    early_c = np.zeros(len(t_index))  # per cell, an event's later partners (concordant)
    early_p = np.zeros(len(t_index))
    beyond = np.zeros(n_bins)  # rows leaving after the block
    late_beyond = np.zeros(n_bins)  # rows entering after the block's last time
    for hi in range(m, 0, -step):
        lo = max(0, hi - step)
        cells, flat, exits, events = block(lo, hi)
        partners = np.cumsum(exits[::-1], axis=0)[::-1] - events + beyond
        if en is not None:
            first, last = np.searchsorted(k, [lo + 1, hi + 1])
            ahead = np.bincount(
                (k[first:last] - lo - 1) * n_bins + k_bin[first:last],
                k_rows[first:last],
                (hi - lo) * n_bins,
            ).reshape(hi - lo, n_bins)
            partners = partners - np.cumsum(ahead[::-1], axis=0)[::-1] - late_beyond
            late_beyond = late_beyond + ahead.sum(axis=0)
        beyond = beyond + exits.sum(axis=0)
        total = partners.sum(axis=1)
        concordant = np.cumsum(partners, axis=1) - 0.5 * partners
        totals += [
            float((events * total[:, None]).sum()),
            float((events * concordant).sum()),
            float((events * partners).sum()),
        ]
        early_c[cells] = concordant.reshape(-1)[flat]
        early_p[cells] = total[t_index[cells] - lo]
    if en is not None:
        return totals, (np.zeros(0), np.zeros(0), np.zeros(0))
    c_i = np.zeros(len(t_index))
    p_i = np.zeros(len(t_index))
    before = np.zeros(n_bins)  # events before the block
    for lo in range(0, m, step):
        hi = min(m, lo + step)
        cells, flat, _, events = block(lo, hi)
        through = np.cumsum(events, axis=0) + before  # events at or before each time
        earlier = through - events  # events before each time

        def higher(counts):
            """Per (time, bin): the events in higher bins, half of those in the same bin."""
            return counts.sum(axis=1)[:, None] - np.cumsum(counts, axis=1) + 0.5 * counts

        before = through[-1]
        at = t_index[cells] - lo
        hit = event[cells]
        # a later event is compared with the events before its time, a censored row with
        # those at its time as well
        c_i[cells] = np.where(
            hit,
            early_c[cells] + higher(earlier).reshape(-1)[flat],
            higher(through).reshape(-1)[flat],
        )
        p_i[cells] = np.where(
            hit, early_p[cells] + earlier.sum(axis=1)[at], through.sum(axis=1)[at]
        )
    return totals, (rows, c_i, p_i)
