"""The Cox partial likelihood from per-(stratum, distinct time) sums, one pass per Newton step.

With w = exp(x·β) (shifted by a constant for range), the log partial likelihood, its score and
its information depend on the rows only through, per stratum and distinct exit time t,
    rows, events d, Σ x over the events,
    S0, S1, S2 = Σ w, Σ w x, Σ w x xᵀ over the rows leaving at t,
    D0, D1, D2 = the same over the events at t,
and, with delayed entry, the same three sums over the rows entering at each distinct entry
time. The risk set at t is {exit >= t} less {entry >= t} (a row entering at or after t has its
exit after t), so its sums are reverse cumulative sums of the exit cells less those of the entry
cells. Efron's correction only needs d, D0, D1, D2: the l-th of d tied events sees
S − (l/d)·D. A backend computes these sums where the data are (``CoxSumsSource.sums``), and
everything else happens here on tables of a few thousand rows.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import numpy as np

from engine.cox_likelihood import LikelihoodTerms

EFRON_CHUNK = 2_000_000  # tied events expanded at a time for Efron's sums over l


@dataclass(frozen=True)
class CoxSums:
    """Per-cell sums at one β; exit cells sorted by (stratum, time), entry cells likewise."""

    stratum: np.ndarray  # (G,) int
    time: np.ndarray  # (G,) float
    rows: np.ndarray  # (G,) rows leaving at the time
    events: np.ndarray  # (G,) d
    event_x: np.ndarray  # (G, q) Σ x over the events
    s0: np.ndarray  # (G,)
    s1: np.ndarray  # (G, q)
    s2: np.ndarray  # (G, q, q)
    d0: np.ndarray
    d1: np.ndarray
    d2: np.ndarray
    shift: float  # w = exp(x·β − shift)
    entry_stratum: np.ndarray | None = None
    entry_time: np.ndarray | None = None
    e0: np.ndarray | None = None
    e1: np.ndarray | None = None
    e2: np.ndarray | None = None


class CoxSumsSource(Protocol):
    """Where the rows are: computes ``CoxSums`` for a β over some columns of the design."""

    n_columns: int

    def sums(self, beta: np.ndarray, columns: np.ndarray) -> CoxSums: ...


@dataclass(frozen=True)
class EventGroups:
    """Per event cell (d > 0): the risk-set sums and Efron's sums over the tied events."""

    stratum: np.ndarray
    time: np.ndarray
    events: np.ndarray
    r1: np.ndarray
    d1: np.ndarray
    sum_a: np.ndarray  # Σ_l 1/den_l
    sum_b: np.ndarray  # Σ_l f_l/den_l


def _reverse_cumsum(values: np.ndarray) -> np.ndarray:
    return np.cumsum(values[::-1], axis=0)[::-1]


def risk_set_sums(sums: CoxSums):
    """R0, R1, R2 at every exit cell: exits at or after t less entries at or after t."""
    r0, r1, r2 = np.empty_like(sums.s0), np.empty_like(sums.s1), np.empty_like(sums.s2)
    for s in np.unique(sums.stratum):
        cells = np.flatnonzero(sums.stratum == s)
        r0[cells] = _reverse_cumsum(sums.s0[cells])
        r1[cells] = _reverse_cumsum(sums.s1[cells])
        r2[cells] = _reverse_cumsum(sums.s2[cells])
        if sums.entry_time is None:
            continue
        entering = np.flatnonzero(sums.entry_stratum == s)
        if not len(entering):
            continue
        pos = np.searchsorted(sums.entry_time[entering], sums.time[cells], side="left")
        for total, part in ((r0, sums.e0), (r1, sums.e1), (r2, sums.e2)):
            tail = np.zeros((len(entering) + 1, *part.shape[1:]))
            tail[:-1] = _reverse_cumsum(part[entering])
            total[cells] -= tail[pos]
    return r0, r1, r2


def _efron_sums(d: np.ndarray, r0: np.ndarray, d0: np.ndarray, ties: str):
    """Per group: Σ log den, Σ a, Σ b, Σ a², Σ ab, Σ b² over the l = 0..d−1 tied events, with
    den = R0 − f D0, f = l/d (0 for Breslow), a = 1/den, b = f/den."""
    d = d.astype(np.int64)
    if ties == "breslow":
        a = 1.0 / r0
        zero = np.zeros_like(r0)
        return d * np.log(r0), d * a, zero, d * a * a, zero, zero
    out = [np.zeros(len(d)) for _ in range(6)]
    ends = np.cumsum(d)
    start = 0
    while start < len(d):
        done = ends[start - 1] if start else 0
        stop = max(int(np.searchsorted(ends, done + EFRON_CHUNK, side="right")), start + 1)
        block = slice(start, stop)
        sizes = d[block]
        group = np.repeat(np.arange(stop - start), sizes)
        place = np.arange(group.size) - np.repeat(np.cumsum(sizes) - sizes, sizes)
        f = place / sizes[group]
        den = r0[block][group] - f * d0[block][group]
        a = 1.0 / den
        b = f * a
        for total, values in zip(out, (np.log(den), a, b, a * a, a * b, b * b), strict=True):
            total[block] = np.bincount(group, values, stop - start)
        start = stop
    return tuple(out)


def likelihood_from_sums(
    sums: CoxSums, beta: np.ndarray, ties: str
) -> tuple[LikelihoodTerms, EventGroups]:
    """Log partial likelihood, score and information at β (the β the sums were taken at)."""
    r0, r1, r2 = risk_set_sums(sums)
    ev = sums.events > 0
    d = sums.events[ev]
    log_den, a, b, aa, ab, bb = _efron_sums(d, r0[ev], sums.d0[ev], ties)
    n_events = float(d.sum())
    event_x = sums.event_x[ev].sum(axis=0)
    loglik = float(event_x @ beta - log_den.sum() - sums.shift * n_events)
    g1, e1 = r1[ev], sums.d1[ev]
    score = event_x - (a @ g1 - b @ e1)
    cross = (g1 * ab[:, None]).T @ e1
    outer = (g1 * aa[:, None]).T @ g1 - cross - cross.T + (e1 * bb[:, None]).T @ e1
    information = np.einsum("g,gij->ij", a, r2[ev]) - np.einsum("g,gij->ij", b, sums.d2[ev])
    information = information - outer
    groups = EventGroups(sums.stratum[ev], sums.time[ev], d, g1, e1, a, b)
    return LikelihoodTerms(loglik, score, information), groups


def sums_from_rows(x, weights, cell, n_cells, event=None):
    """Σ w, Σ w x, Σ w x xᵀ per cell over rows (``event``: only those rows) with bincount."""
    if event is not None:
        x, weights, cell = x[event], weights[event], cell[event]
    q = x.shape[1]
    s0 = np.bincount(cell, weights, n_cells)
    s1 = np.zeros((n_cells, q))
    s2 = np.zeros((n_cells, q, q))
    for i in range(q):
        wx = weights * x[:, i]
        s1[:, i] = np.bincount(cell, wx, n_cells)
        for j in range(i, q):
            s2[:, i, j] = s2[:, j, i] = np.bincount(cell, wx * x[:, j], n_cells)
    return s0, s1, s2


class ArraySource:
    """The memory backend: the design and the survival columns as numpy arrays."""

    def __init__(self, x, time, event, stratum=None, entry=None):
        self.x = np.asarray(x, dtype=float)
        self.n_columns = self.x.shape[1]
        time = np.asarray(time, dtype=float)
        self.event = np.asarray(event).astype(bool)
        n = len(time)
        stratum = np.zeros(n, np.int64) if stratum is None else np.asarray(stratum, np.int64)
        keys = np.rec.fromarrays([stratum, time])
        cells, self.cell = np.unique(keys, return_inverse=True)
        self.cell_stratum = cells.f0.astype(np.int64)
        self.cell_time = cells.f1.astype(float)
        self.n_cells = len(cells)
        self.rows = np.bincount(self.cell, minlength=self.n_cells)
        self.events = np.bincount(self.cell[self.event], minlength=self.n_cells)
        self.entry = None
        if entry is not None:
            e_cells, self.entry_cell = np.unique(
                np.rec.fromarrays([stratum, np.asarray(entry, float)]), return_inverse=True
            )
            self.entry = (e_cells.f0.astype(np.int64), e_cells.f1.astype(float), len(e_cells))

    def sums(self, beta: np.ndarray, columns: np.ndarray) -> CoxSums:
        x = self.x[:, columns]
        eta = x @ beta if len(columns) else np.zeros(len(x))
        shift = float(eta.max())
        w = np.exp(eta - shift)
        s0, s1, s2 = sums_from_rows(x, w, self.cell, self.n_cells)
        d0, d1, d2 = sums_from_rows(x, w, self.cell, self.n_cells, self.event)
        event_x = sums_from_rows(x, np.ones(len(x)), self.cell, self.n_cells, self.event)[1]
        extra = {}
        if self.entry is not None:
            e_stratum, e_time, n_entry = self.entry
            e0, e1, e2 = sums_from_rows(x, w, self.entry_cell, n_entry)
            extra = dict(entry_stratum=e_stratum, entry_time=e_time, e0=e0, e1=e1, e2=e2)
        return CoxSums(
            self.cell_stratum,
            self.cell_time,
            self.rows,
            self.events,
            event_x,
            s0,
            s1,
            s2,
            d0,
            d1,
            d2,
            shift,
            **extra,
        )
