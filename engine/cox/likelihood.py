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
    # The group's own events, [group_start, group_start + size), are one stretch too.
    bounds = np.unique(np.concatenate([group_start, group_start + group_size, group_stratum_end]))
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


def _group_sums(layout: RiskSetLayout, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per group, sums of ``values`` (sorted rows, 1-D or 2-D) over its risk set and over its
    own events."""
    segments = np.add.reduceat(values, layout.segment_bounds, axis=0)
    events = segments[layout.group_first_segment]
    if not layout.has_entry:
        tail = np.zeros((len(segments) + 1, *values.shape[1:]))
        tail[:-1] = np.cumsum(segments[::-1], axis=0)[::-1]
        return tail[layout.group_first_segment] - tail[layout.group_end_segment], events
    # With delayed entry a row adds to the groups in [row_first_group, row_end_group).
    size = layout.n_groups + 1
    if values.ndim == 1:
        diff = np.bincount(layout.row_first_group, values, size) - np.bincount(
            layout.row_end_group, values, size
        )
        return np.cumsum(diff)[:-1], events
    columns = [
        np.bincount(layout.row_first_group, values[:, j], size)
        - np.bincount(layout.row_end_group, values[:, j], size)
        for j in range(values.shape[1])
    ]
    return np.cumsum(np.column_stack(columns), axis=0)[:-1], events


def row_totals(layout: RiskSetLayout, per_group: np.ndarray) -> np.ndarray:
    """For each sorted row, the sum of ``per_group`` (1-D, or 2-D with one row per group) over
    the groups the row is at risk in."""
    per_group = np.asarray(per_group, dtype=float)
    cumulative = np.zeros((len(per_group) + 1, *per_group.shape[1:]))
    np.cumsum(per_group, axis=0, out=cumulative[1:])
    return cumulative[layout.row_end_group] - cumulative[layout.row_first_group]


@dataclass(frozen=True)
class LikelihoodTerms:
    loglik: float
    score: np.ndarray
    information: np.ndarray


def _event_weights(layout, weights, ties):
    """Per event: the (Efron-adjusted) denominator S0 - f D0, with f = l/d for the l-th of d tied
    events (f = 0 for Breslow); also a = 1/den and b = f/den, which carry everything else."""
    s0, d0 = _group_sums(layout, weights)
    frac = layout.event_fraction if ties == "efron" else np.zeros(layout.n_events)
    g = layout.event_group
    den = s0[g] - frac * d0[g]
    with np.errstate(divide="ignore", invalid="ignore"):  # an empty risk set at a runaway beta
        a = 1.0 / den
    return den, a, frac * a


def partial_likelihood(layout: RiskSetLayout, x: np.ndarray, beta: np.ndarray, ties: str):
    """Log partial likelihood, score vector and observed information at ``beta``.

    ``x`` is the design in sorted row order (n x p, p may be 0). With S1, D1 the group's risk-set
    and tied-event sums of w x (and S2, D2 of w x x'), each event contributes the mean
    v = S1 a - D1 b and the information (S2 a - D2 b) - v v'; summed per group these need only
    the per-group sums of a, b, a^2, ab and b^2.
    """
    p = x.shape[1]
    eta = x @ beta if p else np.zeros(len(x))
    shift = eta.max() if len(eta) else 0.0
    weights = np.exp(eta - shift)
    den, a, b = _event_weights(layout, weights, ties)
    ev = layout.event_rows
    loglik = float(eta[ev].sum() - np.log(den).sum() - shift * layout.n_events)
    if p == 0:
        return LikelihoodTerms(loglik, np.zeros(0), np.zeros((0, 0)))
    g, n_groups = layout.event_group, layout.n_groups
    sum_a, sum_b = np.bincount(g, a, n_groups), np.bincount(g, b, n_groups)
    s1, d1 = _group_sums(layout, x * weights[:, None])
    score = layout.event @ x - (sum_a @ s1 - sum_b @ d1)
    row_weight = weights * row_totals(layout, sum_a)
    row_weight[ev] -= weights[ev] * sum_b[g]
    aa, ab, bb = (np.bincount(g, v, n_groups) for v in (a * a, a * b, b * b))
    cross = (s1 * ab[:, None]).T @ d1
    outer = (s1 * aa[:, None]).T @ s1 - cross - cross.T + (d1 * bb[:, None]).T @ d1
    information = (x * row_weight[:, None]).T @ x - outer
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
    return maximise(
        lambda beta: partial_likelihood(layout, x, beta, ties),
        x.shape[1],
        start=start,
        max_iter=max_iter,
        tol=tol,
        step_tol=step_tol,
    )


POLISH_STEPS = 2
POLISH_LIMIT = 1e-4  # as cox.RUNAWAY_STEP: a larger step at the optimum is a runaway, left alone


def maximise(likelihood, p, *, start=None, max_iter=50, tol=1e-11, step_tol=1e-9) -> NewtonResult:
    """Newton–Raphson with step halving on ``likelihood(beta) -> LikelihoodTerms`` (p terms):
    the one loop for rows in memory and for per-time sums computed by a database."""
    given = likelihood

    def likelihood(beta):  # a trial step may overflow (a runaway): it is halved, not shown
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            return given(beta)

    beta = np.zeros(p) if start is None else np.asarray(start, dtype=float)
    terms = likelihood(beta)
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
        candidate = likelihood(beta + step)
        halvings = 0
        # a drop within rounding is no drop: sums over 1e8 rows carry ~1e-8 of noise in the
        # log-likelihood (a database adds them in no fixed order), which must not halve the
        # last step thirty times
        noise = 1e-12 * max(1.0, abs(terms.loglik))
        while (not np.isfinite(candidate.loglik) or candidate.loglik < terms.loglik - noise) and (
            halvings < 30
        ):
            step = step / 2
            candidate = likelihood(beta + step)
            halvings += 1
        if not np.isfinite(candidate.loglik):
            break  # no finite step left (a runaway): stop at the last finite estimate
        change = candidate.loglik - terms.loglik
        beta = beta + step
        terms = candidate
        # Converged when the step is negligible, or when the likelihood no longer moves (which
        # is also where a coefficient running off to infinity stops).
        if np.max(np.abs(step)) < step_tol or abs(change) <= tol * max(1.0, abs(terms.loglik)):
            converged = True
            break
    if converged:
        # A likelihood that stopped moving leaves the estimate within about sqrt(2·tol·|ℓ|/I)
        # of the maximum (1e-5 for a coefficient on 6,500 rows); Newton's next steps close
        # that gap almost for free, so two rows-in-memory and per-time-sums fits that stop a
        # step apart still agree to 1e-9. A coefficient running off to infinity keeps its
        # large step and is left as it is.
        for _ in range(POLISH_STEPS):
            step = _solve(terms.information, terms.score)
            size = float(np.max(np.abs(step)))
            if not size >= step_tol or size > POLISH_LIMIT:
                break
            candidate = likelihood(beta + step)
            noise = 1e-12 * max(1.0, abs(terms.loglik))
            if not np.isfinite(candidate.loglik) or candidate.loglik < terms.loglik - noise:
                terms = likelihood(beta)  # the last sums evaluated stay those at the estimate
                break
            beta, terms = beta + step, candidate
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
    _den, a, b = _event_weights(layout, weights, ties)
    g, n_groups = layout.event_group, layout.n_groups
    s1, d1 = _group_sums(layout, x * weights[:, None])
    with np.errstate(invalid="ignore", over="ignore"):  # at a runaway beta: NaN, flagged there
        total = (
            np.bincount(g, a, n_groups)[:, None] * s1 - np.bincount(g, b, n_groups)[:, None] * d1
        )
    return (total / layout.group_size[:, None])[g]


def baseline_hazard(layout: RiskSetLayout, eta: np.ndarray) -> np.ndarray:
    """Breslow hazard increment per group for linear predictor ``eta`` (sorted rows): events in
    the group divided by the risk-set sum of exp(eta)."""
    with np.errstate(over="ignore", divide="ignore"):  # eta beyond floats at a runaway beta
        s0, _ = _group_sums(layout, np.exp(eta))
        return layout.group_size / s0


def score_residuals(layout: RiskSetLayout, x: np.ndarray, beta: np.ndarray, ties: str):
    """Per sorted row, its share of the score vector (n x p; the rows sum to the score at any
    ``beta``): U_i = d_i (x_i - m_i) - w_i sum_k c_ik (x_i - v_k) / den_k over the events k whose
    risk set holds row i, with v_k and den_k the event's (Efron-adjusted) mean and denominator,
    m_i the mean of v over the row's own tied events, and c_ik = 1 - l/d when row i is one of
    event k's tied events (Efron), else 1. With Breslow ties this is the usual score residual;
    with Efron ties it is the derivative of the weighted Efron score with respect to row i's
    case weight at w = 1, so I^-1 U_i is d beta / d w_i and the sandwich is the infinitesimal
    jackknife (Breslow-form residuals with Efron ties, as statsmodels and lifelines use, do not
    sum to the Efron score). Summed within clusters they give the sandwich (cluster-robust)
    variance.
    """
    p = x.shape[1]
    eta = x @ beta if p else np.zeros(len(x))
    weights = np.exp(eta - (eta.max() if len(eta) else 0.0))
    _den, a, b = _event_weights(layout, weights, ties)
    g, offsets = layout.event_group, layout.group_offsets
    s1, d1 = _group_sums(layout, x * weights[:, None])
    v = s1[g] * a[:, None] - d1[g] * b[:, None]  # each event's mean covariate
    sum_a, sum_b = np.add.reduceat(a, offsets), np.add.reduceat(b, offsets)
    sum_av = np.add.reduceat(v * a[:, None], offsets, axis=0)
    sum_bv = np.add.reduceat(v * b[:, None], offsets, axis=0)
    own_mean = np.add.reduceat(v, offsets, axis=0) / layout.group_size[:, None]
    ev = layout.event_rows
    total_a = row_totals(layout, sum_a)
    total_v = row_totals(layout, sum_av)
    total_a[ev] -= sum_b[g]
    total_v[ev] -= sum_bv[g]
    residuals = -weights[:, None] * (x * total_a[:, None] - total_v)
    residuals[ev] += x[ev] - own_mean[g]
    return residuals
