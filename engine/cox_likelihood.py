"""Cox partial likelihood (Efron or Breslow ties, strata, delayed entry), vectorised.

The rows are sorted once by (stratum, time, events first); every event time within a stratum is
a "tie group". A row is at risk in group g when it belongs to the group's stratum, its entry time
is before the group's time and its exit time is at or after it. Risk-set sums come from reverse
cumulative sums in sorted order; sums over the groups a row is at risk in come from cumulative
sums over groups indexed by two per-row positions. Nothing loops over rows or times in Python.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

TIES = ("efron", "breslow")


@dataclass(frozen=True)
class RiskSetLayout:
    """Sort order and tie groups of (time, event, stratum, entry); independent of the betas."""

    order: np.ndarray  # sorted position -> original row
    time: np.ndarray  # sorted
    event: np.ndarray  # sorted, bool
    stratum: np.ndarray  # sorted stratum codes
    segment_bounds: np.ndarray  # sorted-row starts of the stretches between group boundaries
    group_first_segment: np.ndarray  # the group's risk set is segments [first, end)
    group_end_segment: np.ndarray
    group_time: np.ndarray
    group_stratum: np.ndarray
    group_size: np.ndarray  # events in the group
    event_rows: np.ndarray  # sorted rows with an event, grouped
    event_group: np.ndarray  # group of each event row
    event_fraction: np.ndarray  # Efron l/d for the event's place within its group
    group_offsets: np.ndarray  # first position of each group within event_rows
    row_first_group: np.ndarray  # first group a row is at risk in (after its entry)
    row_end_group: np.ndarray  # one past the last group a row is at risk in
    has_entry: bool

    @property
    def n_groups(self) -> int:
        return len(self.group_time)

    @property
    def n_events(self) -> int:
        return len(self.event_rows)


def build_layout(time, event, stratum=None, entry=None) -> RiskSetLayout:
    """Sort once and index the tie groups; ``stratum`` is an int code per row (or None)."""
    time = np.asarray(time, dtype=float)
    event = np.asarray(event).astype(bool)
    n = len(time)
    stratum = np.zeros(n, dtype=np.int64) if stratum is None else np.asarray(stratum, np.int64)
    grid = np.unique(time if entry is None else np.concatenate([time, np.asarray(entry, float)]))
    width = len(grid) + 1
    time_rank = np.searchsorted(grid, time) + 1
    key = stratum * width + time_rank
    order = np.lexsort((~event, key))
    key_sorted = key[order]
    event_sorted = event[order]
    stratum_sorted = stratum[order]

    event_rows = np.flatnonzero(event_sorted)
    event_keys = key_sorted[event_rows]
    group_keys, group_offsets, group_size = np.unique(
        event_keys, return_index=True, return_counts=True
    )
    n_groups = len(group_keys)
    group_stratum = group_keys // width
    group_start = np.searchsorted(key_sorted, group_keys, side="left")
    group_stratum_end = np.searchsorted(key_sorted, (group_stratum + 1) * width, side="left")
    event_group = np.repeat(np.arange(n_groups), group_size)
    place = np.arange(len(event_rows)) - group_offsets[event_group]
    event_fraction = place / group_size[event_group]

    row_end_group = np.searchsorted(group_keys, key_sorted, side="right")
    if entry is None:
        row_first_group = np.searchsorted(group_keys, stratum_sorted * width, side="left")
    else:
        entry_rank = np.searchsorted(grid, np.asarray(entry, float)[order]) + 1
        row_first_group = np.searchsorted(
            group_keys, stratum_sorted * width + entry_rank, side="right"
        )
    # A row that enters at or after its exit is never at risk (the prepared frame excludes these).
    row_first_group = np.minimum(row_first_group, row_end_group)
    # Risk sets without delayed entry are runs of sorted rows, [group_start, stratum end): sums
    # over the stretches between these boundaries, then a reverse cumulative sum, give them all.
    bounds = np.unique(np.concatenate([group_start, group_stratum_end]))
    bounds = bounds[bounds < n]
    return RiskSetLayout(
        order=order,
        time=np.asarray(time[order]),
        event=event_sorted,
        stratum=stratum_sorted,
        segment_bounds=bounds,
        group_first_segment=np.searchsorted(bounds, group_start),
        group_end_segment=np.searchsorted(bounds, group_stratum_end),
        group_time=grid[group_keys % width - 1],
        group_stratum=group_stratum,
        group_size=group_size,
        event_rows=event_rows,
        event_group=event_group,
        event_fraction=event_fraction,
        group_offsets=group_offsets,
        row_first_group=row_first_group,
        row_end_group=row_end_group,
        has_entry=entry is not None,
    )


def _group_sums(layout: RiskSetLayout, values: np.ndarray) -> np.ndarray:
    """Sum of ``values`` (sorted rows, 1-D or 2-D) over each group's risk set."""
    if not layout.has_entry:
        segments = np.add.reduceat(values, layout.segment_bounds, axis=0)
        tail = np.zeros((len(segments) + 1, *values.shape[1:]))
        tail[:-1] = np.cumsum(segments[::-1], axis=0)[::-1]
        return tail[layout.group_first_segment] - tail[layout.group_end_segment]
    # With delayed entry a row adds to the groups in [row_first_group, row_end_group).
    size = layout.n_groups + 1
    if values.ndim == 1:
        diff = np.bincount(layout.row_first_group, values, size) - np.bincount(
            layout.row_end_group, values, size
        )
        return np.cumsum(diff)[:-1]
    columns = [
        np.bincount(layout.row_first_group, values[:, j], size)
        - np.bincount(layout.row_end_group, values[:, j], size)
        for j in range(values.shape[1])
    ]
    return np.cumsum(np.column_stack(columns), axis=0)[:-1]


def row_totals(layout: RiskSetLayout, per_group: np.ndarray) -> np.ndarray:
    """For each sorted row, the sum of ``per_group`` over the groups the row is at risk in."""
    cumulative = np.concatenate([[0.0], np.cumsum(per_group)])
    return cumulative[layout.row_end_group] - cumulative[layout.row_first_group]


@dataclass(frozen=True)
class LikelihoodTerms:
    loglik: float
    score: np.ndarray
    information: np.ndarray


def _denominators(layout, weights, ties):
    """Per event: the (Efron-adjusted) risk-set sum; also the per-group sums it used."""
    s0 = _group_sums(layout, weights)
    d0 = np.add.reduceat(weights[layout.event_rows], layout.group_offsets)
    frac = layout.event_fraction if ties == "efron" else np.zeros(layout.n_events)
    g = layout.event_group
    return s0[g] - frac * d0[g], s0, d0, frac


def partial_likelihood(layout: RiskSetLayout, x: np.ndarray, beta: np.ndarray, ties: str):
    """Log partial likelihood, score vector and observed information at ``beta``.

    ``x`` is the design in sorted row order (n x p, p may be 0).
    """
    p = x.shape[1]
    eta = x @ beta if p else np.zeros(len(x))
    shift = eta.max() if len(eta) else 0.0
    weights = np.exp(eta - shift)
    den, _s0, _d0, frac = _denominators(layout, weights, ties)
    g = layout.event_group
    ev = layout.event_rows
    loglik = float(eta[ev].sum() - np.log(den).sum() - shift * layout.n_events)
    if p == 0:
        return LikelihoodTerms(loglik, np.zeros(0), np.zeros((0, 0)))
    wx = x * weights[:, None]
    s1 = _group_sums(layout, wx)
    d1 = np.add.reduceat(wx[ev], layout.group_offsets, axis=0)
    numer = s1[g] - frac[:, None] * d1[g]
    mean = numer / den[:, None]
    score = x[ev].sum(axis=0) - mean.sum(axis=0)
    inv = 1.0 / den
    per_group = np.bincount(g, inv, layout.n_groups)
    per_group_frac = np.bincount(g, frac * inv, layout.n_groups)
    row_weight = weights * row_totals(layout, per_group)
    # Efron: the tied events' own share is removed with weight sum(l/d / den) in their group.
    row_weight[ev] -= weights[ev] * per_group_frac[g]
    information = (x * row_weight[:, None]).T @ x - mean.T @ mean
    return LikelihoodTerms(loglik, score, information)


@dataclass(frozen=True)
class NewtonResult:
    beta: np.ndarray
    loglik: float
    information: np.ndarray
    iterations: int
    converged: bool
    last_step: np.ndarray  # the Newton step proposed at the solution (large: running off)
    null_loglik: float  # at beta = 0
    null_score_statistic: float  # score test of beta = 0: U(0)' I(0)^-1 U(0)


def newton_raphson(
    layout, x, ties, *, start=None, max_iter=50, tol=1e-11, step_tol=1e-9
) -> NewtonResult:
    """Maximise the partial likelihood with step halving, from ``start`` (default beta = 0).

    The null log-likelihood and score statistic are filled in only when starting from 0.
    """
    p = x.shape[1]
    beta = np.zeros(p) if start is None else np.asarray(start, dtype=float)
    terms = partial_likelihood(layout, x, beta, ties)
    null_loglik = terms.loglik if start is None else float("nan")
    if p == 0:
        return NewtonResult(beta, terms.loglik, terms.information, 0, True, beta, null_loglik, 0.0)
    null_score = (
        float(terms.score @ _solve(terms.information, terms.score))
        if start is None
        else float("nan")
    )
    converged = False
    step = np.zeros(p)
    iterations = 0
    for iterations in range(1, max_iter + 1):  # noqa: B007
        step = _solve(terms.information, terms.score)
        candidate = partial_likelihood(layout, x, beta + step, ties)
        halvings = 0
        while (not np.isfinite(candidate.loglik) or candidate.loglik < terms.loglik - 1e-12) and (
            halvings < 30
        ):
            step = step / 2
            candidate = partial_likelihood(layout, x, beta + step, ties)
            halvings += 1
        change = candidate.loglik - terms.loglik
        beta = beta + step
        terms = candidate
        # Converged when the step is negligible, or when the likelihood no longer moves (which
        # is also where a coefficient running off to infinity stops).
        if np.max(np.abs(step)) < step_tol or abs(change) <= tol * max(1.0, abs(terms.loglik)):
            converged = True
            break
    last_step = _solve(terms.information, terms.score)
    return NewtonResult(
        beta,
        terms.loglik,
        terms.information,
        iterations,
        converged,
        last_step,
        null_loglik,
        null_score,
    )


def _solve(information, score):
    try:
        return np.linalg.solve(information, score)
    except np.linalg.LinAlgError:
        return np.linalg.lstsq(information, score, rcond=None)[0]


def event_means(layout: RiskSetLayout, x: np.ndarray, beta: np.ndarray, ties: str) -> np.ndarray:
    """Per event (in ``layout.event_rows`` order): the risk-weighted covariate mean it is compared
    with; for Efron, averaged over the tied events' adjusted risk sets as in the likelihood."""
    eta = x @ beta
    weights = np.exp(eta - eta.max())
    den, _s0, _d0, frac = _denominators(layout, weights, ties)
    wx = x * weights[:, None]
    s1 = _group_sums(layout, wx)
    d1 = np.add.reduceat(wx[layout.event_rows], layout.group_offsets, axis=0)
    g = layout.event_group
    mean = (s1[g] - frac[:, None] * d1[g]) / den[:, None]
    group_mean = np.add.reduceat(mean, layout.group_offsets, axis=0) / layout.group_size[:, None]
    return group_mean[g]


def baseline_hazard(layout: RiskSetLayout, eta: np.ndarray) -> np.ndarray:
    """Breslow hazard increment per group for linear predictor ``eta`` (sorted rows): events in
    the group divided by the risk-set sum of exp(eta)."""
    s0 = _group_sums(layout, np.exp(eta))
    return layout.group_size / s0
