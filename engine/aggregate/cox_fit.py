"""A Cox model fitted from per-time sums: the same ``CoxResult`` and PH test as ``fit_cox``.

The design's terms, centring and scaling, complete cases and level checks come from the backend
as a ``Design`` without rows (``matrix`` empty); each Newton step asks the backend for the
per-(stratum, time) sums at the current coefficients (``cox_sums``). The drop-one refits and
the Grambsch–Therneau test use the same sums. Harrell's C needs pairs of rows: a backend that
can count them (rows in memory) gives it exactly; otherwise the result says it was not computed.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from engine.aggregate.cox_sums import CoxSumsSource, EventGroups, likelihood_from_sums
from engine.cox.concordance import ConcordanceResult
from engine.cox.design import Design
from engine.cox.diagnostics import TIME_SCALES, PHTest, ph_test_from_sums
from engine.cox.fit import (
    SINGULAR_INFORMATION,
    ChiSquareTest,
    CoxResult,
    _variable_wald,
    chi_square,
    fit_warnings,
    runaway_terms,
    term_estimates,
)
from engine.cox.likelihood import TIES, maximise
from engine.errors import AnalysisError, preview_values

NOT_COUNTED = ConcordanceResult(float("nan"), float("nan"), 0.0, 0.0, 0.0, 0.0)
CONCORDANCE_NOT_COMPUTED = (
    "Harrell's C was not computed: it compares pairs of rows, which per-time sums do not keep."
)


def fit_cox_from_sums(
    source: CoxSumsSource,
    design: Design,
    *,
    ties: str = "efron",
    confidence: float = 0.95,
    drop_one: bool = True,
    ph_time_scale: str | None = "survival",
    concordance: Callable[[np.ndarray], ConcordanceResult] | None = None,
    max_iterations: int = 50,
    not_estimable: tuple[str, ...] = (),
    strata: str | None = None,
) -> tuple[CoxResult, PHTest | dict | None]:
    """Fit by Newton–Raphson on sums from ``source`` (its columns: the design centred by
    ``design.center`` and divided by ``design.scale``); ``concordance(eta_beta)`` is given the
    coefficients on that scaled design."""
    if ties not in TIES:
        raise AnalysisError(f"Ties method {ties!r} is not known; use 'efron' or 'breslow'.")
    if not 0 < confidence < 1:
        raise AnalysisError(f"Confidence level {confidence!r} must be between 0 and 1.")
    p = len(design.terms)
    everything = np.arange(p)
    last: dict = {}

    def likelihood(columns):
        def at(beta):
            sums = source.sums(beta, columns)
            terms, groups = likelihood_from_sums(sums, beta, ties)
            last["groups"] = groups
            return terms

        return at

    at_zero = source.sums(np.zeros(p), everything)
    events = int(at_zero.events.sum())
    if events == 0:
        raise AnalysisError(
            "None of the rows used by the Cox model has an event, so nothing can be estimated; "
            "check the event coding."
        )
    fit = maximise(likelihood(everything), p, max_iter=max_iterations)
    # ``maximise`` evaluates the accepted step last, so these are the sums at the estimate.
    final_groups = last["groups"]
    try:
        cov_scaled = np.linalg.inv(fit.information)
    except np.linalg.LinAlgError as exc:
        raise AnalysisError(SINGULAR_INFORMATION) from exc
    scale = design.scale
    beta = fit.beta / scale
    covariance = cov_scaled / np.outer(scale, scale)
    warnings, finite_estimates = fit_warnings(design, fit, events, not_estimable, strata)
    runaway = runaway_terms(fit)
    no_test = ChiSquareTest("model", float("nan"), p, float("nan"))
    if concordance is None:
        c = NOT_COUNTED
        warnings.append(CONCORDANCE_NOT_COMPUTED)
    else:
        c = concordance(fit.beta)
    drop_tests = []
    if drop_one:
        for variable in design.variables:
            cols = design.columns_of(variable)
            keep = np.setdiff1d(everything, cols)
            if len(keep) == 0:
                reduced = fit.null_loglik
            else:
                reduced = maximise(likelihood(keep), len(keep), start=fit.beta[keep]).loglik
            drop_tests.append(chi_square(variable, 2 * (fit.loglik - reduced), len(cols)))
    result = CoxResult(
        n=int(at_zero.rows.sum()),
        events=events,
        ties=ties,
        confidence=confidence,
        terms=term_estimates(design.terms, beta, covariance, confidence, None, runaway),
        variable_wald=tuple(_variable_wald(design, beta, covariance, runaway)),
        likelihood_ratio=chi_square("model", 2 * (fit.loglik - fit.null_loglik), p)
        if finite_estimates
        else no_test,
        wald=chi_square("model", fit.beta @ fit.information @ fit.beta, p)
        if finite_estimates
        else no_test,
        score=chi_square("model", fit.null_score_statistic, p),
        loglik=fit.loglik,
        null_loglik=fit.null_loglik,
        aic=-2 * fit.loglik + 2 * p,
        concordance=c,
        without_each=tuple(drop_tests),
        iterations=fit.iterations,
        converged=fit.converged,
        dropped=dict(design.dropped),
        warnings=tuple(warnings),
        design=design,
        model=None,
        not_estimable=tuple(not_estimable),
    )
    ph = None
    if ph_time_scale is not None:
        from engine.analysis.run import computed

        ph = computed(ph_test_from_groups, final_groups, at_zero, design, covariance, ph_time_scale)
    return result, ph


def transformed_event_times(time_scale: str, groups: EventGroups, at_zero) -> np.ndarray:
    """g(t) per event cell, as ``cox_diagnostics.transform_times`` gives it per event (the
    survival scale from the Kaplan–Meier estimate of the model's rows, at risk on
    (entry, time] with delayed entry)."""
    t = groups.time
    if time_scale == "time":
        return t.astype(float)
    if time_scale == "log-time":
        if np.any(t <= 0):
            raise AnalysisError(
                "The log-time scale needs positive event times; some events are at time 0. "
                "Use the survival, rank or time scale."
            )
        return np.log(t)
    times, inverse = np.unique(at_zero.time, return_inverse=True)
    rows = np.bincount(inverse, at_zero.rows, len(times))
    events = np.bincount(inverse, at_zero.events, len(times))
    position = np.searchsorted(times, t)
    if time_scale == "rank":
        before = np.concatenate([[0.0], np.cumsum(events)])
        return before[position] + (events[position] + 1) / 2
    if time_scale == "survival":
        at_risk = np.cumsum(rows[::-1])[::-1]
        if at_zero.entry_time is not None and len(at_zero.entry_time):
            # rows entering at or after t are not at risk at t; w = exp(-shift) at beta = 0
            entering = np.rint(at_zero.e0 * np.exp(at_zero.shift))
            order = np.argsort(at_zero.entry_time, kind="stable")
            entry_time, entering = at_zero.entry_time[order], entering[order]
            tail = np.concatenate([np.cumsum(entering[::-1])[::-1], [0.0]])
            at_risk = at_risk - tail[np.searchsorted(entry_time, times, side="left")]
        with np.errstate(divide="ignore", invalid="ignore"):
            factor = np.where(events > 0, 1.0 - events / at_risk, 1.0)
            survival = np.concatenate([[1.0], np.cumprod(factor)])
        return 1 - survival[position]
    raise AnalysisError(
        f"Time scale {time_scale!r} of the proportional-hazards check is not known; use one of "
        f"{preview_values(TIME_SCALES)}."
    )


def ph_test_from_groups(groups: EventGroups, at_zero, design, covariance, time_scale) -> PHTest:
    """Grambsch–Therneau from the final sums: Σ_k g_k r_k = Σ over event cells of
    (g − ḡ)(Σ x over its events − (A·R1 − B·D1)), the residuals' per-cell total."""
    g = transformed_event_times(time_scale, groups, at_zero)
    d = groups.events.astype(float)
    total = float(d.sum())
    g = g - (d @ g) / total
    event_x = at_zero.event_x[at_zero.events > 0]
    expected = groups.sum_a[:, None] * groups.r1 - groups.sum_b[:, None] * groups.d1
    residual_total = event_x - expected
    raw = (g @ residual_total) * design.scale
    u = total * raw @ covariance
    denominator = total * float(d @ (g * g))
    return ph_test_from_sums(u, denominator, covariance, design, time_scale)
