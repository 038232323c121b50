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

from engine.cox.likelihood import LikelihoodTerms

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


# Bernoulli numbers B2, B4, ..., B14 for the asymptotic series of log Γ, ψ and ψ′
_BERNOULLI = np.array([1 / 6, -1 / 30, 1 / 42, -1 / 30, 5 / 66, -691 / 2730, 7 / 6])
_SERIES_FROM = 10.0  # the series (7 terms) is used for arguments >= this: error < 1e-16
EFRON_DIRECT_TIES = 64  # up to this many tied events the sums over l are added term by term


def _tie_sums(x: np.ndarray, d: np.ndarray):
    """Σ log(x − l), Σ 1/(x − l) and Σ 1/(x − l)² over l = 0..d−1, for x ≥ d, in O(1) each.

    They are log Γ(x+1) − log Γ(x−d+1), ψ(x+1) − ψ(x−d+1) and ψ′(x−d+1) − ψ′(x+1). For a
    smallest argument y1 = x−d+1 of at least 10 the differences come from the asymptotic
    series written so that nothing cancels (log1p(d/y1), d/(y1·y2), …): a registry time has
    thousands of tied events among millions at risk, where ψ(x+1) − ψ(x−d+1) taken directly
    would lose most of its digits. Below 10 (nearly every row at risk has the event) the
    functions are evaluated directly, where there is nothing to lose.
    """
    from scipy.special import gammaln, polygamma, psi

    y1 = x - d + 1.0
    y2 = x + 1.0
    log_sum = np.empty_like(x)
    h1 = np.empty_like(x)
    h2 = np.empty_like(x)
    big = y1 >= _SERIES_FROM
    if big.any():
        a, b, n = y1[big], y2[big], d[big]
        ratio = np.log1p(n / a)
        # log Γ(b) − log Γ(a) = (a − ½)·log(b/a) + n·log b − n
        #   + Σ B2k/(2k(2k−1))·(b^(1−2k) − a^(1−2k))
        lg = (a - 0.5) * ratio + n * np.log(b) - n
        dg = ratio - 0.5 * (1.0 / b - 1.0 / a)  # ψ(b) − ψ(a), leading terms: log + 1/(2y)
        tg = n / (a * b) + 0.5 * (1.0 / (a * a) - 1.0 / (b * b))  # ψ′(a) − ψ′(b)
        for k, bern in enumerate(_BERNOULLI, start=1):
            lg += bern / (2 * k * (2 * k - 1)) * (b ** (1 - 2 * k) - a ** (1 - 2 * k))
            dg -= bern / (2 * k) * (b ** (-2 * k) - a ** (-2 * k))
            tg += bern * (a ** (-2 * k - 1) - b ** (-2 * k - 1))
        log_sum[big], h1[big], h2[big] = lg, dg, tg
    small = ~big
    if small.any():
        a, b = y1[small], y2[small]
        log_sum[small] = gammaln(b) - gammaln(a)
        h1[small] = psi(b) - psi(a)
        h2[small] = polygamma(1, a) - polygamma(1, b)
    return log_sum, h1, h2


def _efron_sums(d: np.ndarray, r0: np.ndarray, d0: np.ndarray, ties: str):
    """Per group: Σ log den, Σ a, Σ b, Σ a², Σ ab, Σ b² over the l = 0..d−1 tied events, with
    den = R0 − f D0, f = l/d (0 for Breslow), a = 1/den, b = f/den.

    Groups of up to ``EFRON_DIRECT_TIES`` events are summed term by term; larger ones in
    closed form (``_tie_sums``), so the cost grows with the distinct times, not the events.
    With B = D0/d and x = R0/B, den = B·(x − l), and l/(x−l) = x/(x−l) − 1 turns every sum
    into H1 = Σ 1/(x−l) and H2 = Σ 1/(x−l)².
    """
    d = d.astype(np.int64)
    if ties == "breslow":
        a = 1.0 / r0
        zero = np.zeros_like(r0)
        return d * np.log(r0), d * a, zero, d * a * a, zero, zero
    out = [np.zeros(len(d)) for _ in range(6)]
    many = d > EFRON_DIRECT_TIES
    if many.any():
        n = d[many].astype(float)
        unit = d0[many] / n
        x = np.maximum(r0[many] / unit, n)  # R0 >= D0; rounding must not put x below d
        log_sum, h1, h2 = _tie_sums(x, n)
        out[0][many] = n * np.log(unit) + log_sum
        out[1][many] = h1 / unit
        out[2][many] = (x * h1 - n) / (n * unit)
        out[3][many] = h2 / unit**2
        out[4][many] = (x * h2 - h1) / (n * unit**2)
        out[5][many] = (x * x * h2 - 2.0 * x * h1 + n) / (n * n * unit**2)
    few = np.flatnonzero(~many & (d > 0))
    ends = np.cumsum(d[few])
    start = 0
    while start < len(few):
        done = ends[start - 1] if start else 0
        stop = max(int(np.searchsorted(ends, done + EFRON_CHUNK, side="right")), start + 1)
        block = few[start:stop]
        sizes = d[block]
        group = np.repeat(np.arange(len(block)), sizes)
        place = np.arange(group.size) - np.repeat(np.cumsum(sizes) - sizes, sizes)
        f = place / sizes[group]
        den = r0[block][group] - f * d0[block][group]
        a = 1.0 / den
        b = f * a
        for total, values in zip(out, (np.log(den), a, b, a * a, a * b, b * b), strict=True):
            total[block] = np.bincount(group, values, len(block))
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
