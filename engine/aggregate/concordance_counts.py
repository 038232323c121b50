"""Harrell's C from counts of rows per (stratum, score bin, time, event) and, with delayed
entry, per (stratum, score bin, entry time): the pairs of ``engine.concordance.harrell_c``
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

The work is dense in (distinct time x bin) per stratum: a few arrays of 8 bytes per cell (8 MB
each for 1,000 times and 1,000 bins); the partner counts go through it in blocks of times
(``BLOCK_CELLS``).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from engine.concordance import ConcordanceResult, concordance_result
from engine.errors import AnalysisError
from engine.json_values import json_float

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
    exits: pd.DataFrame, entries: pd.DataFrame | None, n_bins: int, *, exact: bool
) -> BinnedConcordance:
    """C from ``exits`` (columns stratum, bin, time, event 0/1, rows) and ``entries`` (stratum,
    bin, entry, rows) with bins coded 0..n_bins-1 in increasing score; ``exact`` when each bin
    holds a single distinct score."""
    totals = np.zeros(3)  # comparable, concordant (half for same bin), same bin
    cells = []  # per stratum: rows, c_i, p_i per cell, for the standard error
    for stratum in np.unique(exits["stratum"].to_numpy()):
        ex = exits[exits["stratum"].to_numpy() == stratum]
        en = None if entries is None else entries[entries["stratum"].to_numpy() == stratum]
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


def _stratum_pairs(ex: pd.DataFrame, en: pd.DataFrame | None, n_bins: int):
    times, t_index = np.unique(ex["time"].to_numpy(float), return_inverse=True)
    m = len(times)
    b = ex["bin"].to_numpy(np.int64)
    rows = ex["rows"].to_numpy(float)
    event = ex["event"].to_numpy() == 1
    flat = t_index * n_bins + b

    def dense(keys, weights, size):
        return np.bincount(keys, weights, size)

    exits_all = dense(flat, rows, m * n_bins).reshape(m, n_bins)
    events = dense(flat[event], rows[event], m * n_bins).reshape(m, n_bins)
    censored = exits_all - events
    if en is not None:
        # rows entering at or after times[i] are not at risk there: k = number of times <= entry
        k = np.searchsorted(times, en["entry"].to_numpy(float), side="right")
        entry_flat = k * n_bins + en["bin"].to_numpy(np.int64)
        entered = dense(entry_flat, en["rows"].to_numpy(float), (m + 1) * n_bins)
        entered = entered.reshape(m + 1, n_bins)
    step = max(1, BLOCK_CELLS // max(n_bins, 1))
    totals = np.zeros(3)
    early_c = np.zeros((m, n_bins))  # per event cell: concordant and comparable partners
    early_p = np.zeros(m)
    beyond = np.zeros(n_bins)  # rows leaving after the block
    late_beyond = np.zeros(n_bins)  # rows with k > the block's last index + 1
    for hi in range(m, 0, -step):
        lo = max(0, hi - step)
        block = exits_all[lo:hi]
        later = np.cumsum(block[::-1], axis=0)[::-1] - block + beyond  # leave after times[i]
        partners = later + censored[lo:hi]
        if en is not None:
            ahead = entered[lo + 1 : hi + 1]
            late = np.cumsum(ahead[::-1], axis=0)[::-1] + late_beyond  # entry >= times[i]
            partners = partners - late
            late_beyond = late_beyond + ahead.sum(axis=0)
        beyond = beyond + block.sum(axis=0)
        total = partners.sum(axis=1)
        below = np.cumsum(partners, axis=1) - partners
        d = events[lo:hi]
        totals += [
            float((d * total[:, None]).sum()),
            float((d * (below + 0.5 * partners)).sum()),
            float((d * partners).sum()),
        ]
        if en is None:
            early_c[lo:hi] = below + 0.5 * partners
            early_p[lo:hi] = total
    if en is not None:
        return totals, (np.zeros(0), np.zeros(0), np.zeros(0))
    # the later member's side: events before t (at t as well for a censored row)
    cum_d = np.cumsum(events, axis=0)
    above = cum_d.sum(axis=1)[:, None] - np.cumsum(cum_d, axis=1) + 0.5 * cum_d
    before = np.vstack([np.zeros((1, n_bins)), above[:-1]])
    before_total = np.r_[0.0, cum_d.sum(axis=1)[:-1]]
    c_i = np.where(event, early_c[t_index, b] + before[t_index, b], above[t_index, b])
    p_i = np.where(event, early_p[t_index] + before_total[t_index], cum_d.sum(axis=1)[t_index])
    return totals, (rows, c_i, p_i)
