"""Fine–Gray regression: covariate effects on the cumulative incidence of one cause.

Fine and Gray (1999, JASA 94:496–509) model the subdistribution hazard of the cause, the hazard
among subjects who have not had it, where a subject with a competing event stays in the risk set
after that event. Under censoring, such a subject's presence after its event is weighted by the
chance it would still have been observed: at an event time t of the cause, subject i weighs

    w_i(t) = 1                      while T_i >= t (still under follow-up),
    w_i(t) = G(t-) / G(T_i-)        after a competing event at T_i < t,
    w_i(t) = 0                      after its censoring or its own event of the cause,

G the Kaplan–Meier estimate of the censoring distribution (engine.prediction.ipcw), in which
events come before censorings at a tied time (factor 1 - c/(n - d)): of the conventions
G(u±)/G(T_i±), with G of either tie rule, this is G(u-)/G(T_i-) with events first. They differ
only where exits tie; on scikit-survival's bone-marrow data (whole months) the Breslow
coefficient is 0.764457 here and 0.760337–0.765170 under the seven others (DEVELOPERS.md).
The design refuses as many terms as subjects (collinear), so the sandwich below, one cluster
per subject, has more clusters than terms; where it is singular all the same (a coefficient
running off to infinity), the model-based errors are shown with a warning. The estimates
maximise
the weighted partial likelihood: a Cox model fitted to the data expanded into weighted intervals
(Geskus 2011, Biometrics 67:39–49) gives the same coefficients. Here nothing is expanded: since
w_i(t) = G(t-) x 1/G(T_i-) factorises, every weighted risk-set sum is a sum over subjects still
followed plus G(t-) times a running sum over earlier competing events, both cumulative sums over
the rows sorted once by time. Tied events of the cause (all of weight 1) are handled by Efron's
or Breslow's method, as in engine.cox.fit.

Standard errors: ``se`` is the robust (sandwich) estimate with one score residual per subject,
the variance Geskus recommends for the weighted fit; ``se_model`` the inverse of the weighted
information, which treats the weights as known frequencies and understates uncertainty.

What a subdistribution hazard ratio means: a ratio above 1 says the covariate goes with a higher
cumulative incidence of the cause (more subjects having it by any time), combining the effect on
the cause itself with the effect on the competing causes. It is not the effect on the rate of
the cause among those still free of every event (that is the cause-specific hazard ratio), and
it does not by itself say how much the incidence changes: read the predicted curves for that.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from engine.competing.incidence import _cause_codes
from engine.cox.design import Design, build_design
from engine.cox.fit import (
    TermEstimate,
    chi_square,
    informative_clusters,
    sandwich,
    singular_robust_warning,
    term_estimates,
    wald_statistic,
)
from engine.cox.likelihood import TIES, maximise
from engine.errors import AnalysisError, preview_values
from engine.json_values import json_float
from engine.prediction.ipcw import censoring_survival

MEANING = (
    "A subdistribution hazard ratio above 1 means the covariate goes with a higher cumulative "
    "incidence of this cause: more subjects have had it by any given time. It mixes the "
    "covariate's effect on this cause with its effect on the competing causes, so it is not the "
    "effect on the rate of this cause among those still free of every event (the cause-specific "
    "hazard ratio answers that), and it does not say by how much the incidence changes: the "
    "predicted cumulative incidence curves show that."
)


@dataclass(frozen=True)
class _Layout:
    """Rows sorted by time, the distinct event times of the cause and the censoring weights."""

    order: np.ndarray
    time: np.ndarray  # sorted
    is_cause: np.ndarray  # sorted, bool
    competing_weight: np.ndarray  # sorted: 1 / G(T_i-) after a competing event, else 0
    event_rows: np.ndarray  # sorted rows with the cause, grouped by time
    event_group: np.ndarray
    event_fraction: np.ndarray  # Efron l / d
    group_time: np.ndarray
    group_size: np.ndarray
    group_start: np.ndarray  # first sorted row with time >= the group's time
    group_censoring: np.ndarray  # G(t-) at the group's time
    row_groups_up_to: np.ndarray  # number of groups with time <= the row's time


def _build_layout(time, status) -> _Layout:
    order = np.argsort(time, kind="stable")
    t = time[order]
    s = status[order]
    censoring = censoring_survival(t, s > 0)
    event_rows = np.flatnonzero(s == 1)
    group_time, offsets, sizes = np.unique(t[event_rows], return_index=True, return_counts=True)
    event_group = np.repeat(np.arange(len(group_time)), sizes)
    fraction = (np.arange(len(event_rows)) - offsets[event_group]) / sizes[event_group]
    with np.errstate(divide="ignore"):
        competing = np.where(s == 2, 1.0 / censoring.before(t), 0.0)
    return _Layout(
        order=order,
        time=t,
        is_cause=s == 1,
        competing_weight=competing,
        event_rows=event_rows,
        event_group=event_group,
        event_fraction=fraction,
        group_time=group_time,
        group_size=sizes,
        group_start=np.searchsorted(t, group_time, side="left"),
        group_censoring=censoring.before(group_time),
        row_groups_up_to=np.searchsorted(group_time, t, side="right"),
    )


def _risk_sums(layout: _Layout, values: np.ndarray) -> np.ndarray:
    """Per event time: the weighted risk-set sum of ``values`` (sorted rows, 1-D or 2-D)."""
    shape = (1, *values.shape[1:])
    followed = np.concatenate([np.cumsum(values[::-1], axis=0)[::-1], np.zeros(shape)])
    weight = layout.competing_weight if values.ndim == 1 else layout.competing_weight[:, None]
    earlier = np.concatenate([np.zeros(shape), np.cumsum(values * weight, axis=0)])
    g = layout.group_censoring if values.ndim == 1 else layout.group_censoring[:, None]
    return followed[layout.group_start] + g * earlier[layout.group_start]


def _row_totals(layout: _Layout, per_group: np.ndarray) -> np.ndarray:
    """Per sorted row: the sum over event times of w_i(t) times ``per_group`` (1-D or 2-D)."""
    shape = (1, *per_group.shape[1:])
    upto = np.concatenate([np.zeros(shape), np.cumsum(per_group, axis=0)])
    g = layout.group_censoring if per_group.ndim == 1 else layout.group_censoring[:, None]
    later = np.concatenate([np.cumsum((g * per_group)[::-1], axis=0)[::-1], np.zeros(shape)])
    k = layout.row_groups_up_to
    weight = layout.competing_weight if per_group.ndim == 1 else layout.competing_weight[:, None]
    return upto[k] + weight * later[k]


@dataclass(frozen=True)
class _Terms:
    loglik: float
    score: np.ndarray
    information: np.ndarray
    pieces: dict


def _likelihood(layout: _Layout, x: np.ndarray, beta: np.ndarray, ties: str) -> _Terms:
    """Weighted log partial likelihood, score and information (x sorted and scaled)."""
    eta = x @ beta
    shift = float(eta.max()) if len(eta) else 0.0
    r = np.exp(eta - shift)
    ev, g = layout.event_rows, layout.event_group
    n_groups = len(layout.group_time)
    s0 = _risk_sums(layout, r)
    d0 = np.bincount(g, r[ev], n_groups)
    frac = layout.event_fraction if ties == "efron" else np.zeros(len(ev))
    den = s0[g] - frac * d0[g]
    a = 1.0 / den
    b = frac * a
    loglik = float(eta[ev].sum() - np.log(den).sum() - shift * len(ev))
    rx = x * r[:, None]
    s1 = _risk_sums(layout, rx)
    d1 = np.zeros((n_groups, x.shape[1]))
    np.add.at(d1, g, rx[ev])
    sum_a, sum_b = np.bincount(g, a, n_groups), np.bincount(g, b, n_groups)
    score = x[ev].sum(axis=0) - (sum_a @ s1 - sum_b @ d1)
    row_weight = r * _row_totals(layout, sum_a)
    row_weight[ev] -= r[ev] * sum_b[g]
    aa, ab, bb = (np.bincount(g, v, n_groups) for v in (a * a, a * b, b * b))
    cross = (s1 * ab[:, None]).T @ d1
    outer = (s1 * aa[:, None]).T @ s1 - cross - cross.T + (d1 * bb[:, None]).T @ d1
    information = (x * row_weight[:, None]).T @ x - outer
    pieces = {
        "r": r, "shift": shift, "s1": s1, "d1": d1, "sum_a": sum_a, "sum_b": sum_b,
        "aa": aa, "ab": ab, "bb": bb,
    }  # fmt: skip
    return _Terms(loglik, score, information, pieces)


def _score_residuals(layout: _Layout, x: np.ndarray, terms: _Terms) -> np.ndarray:
    """One score residual per subject (sorted rows); they sum to the score."""
    p = terms.pieces
    r, s1, d1 = p["r"], p["s1"], p["d1"]
    gamma = s1 * p["aa"][:, None] - d1 * p["ab"][:, None]  # sum over pieces of mean / den
    delta = s1 * p["ab"][:, None] - d1 * p["bb"][:, None]
    mean_event = (s1 * p["sum_a"][:, None] - d1 * p["sum_b"][:, None]) / layout.group_size[:, None]
    residual = -r[:, None] * (
        x * _row_totals(layout, p["sum_a"])[:, None] - _row_totals(layout, gamma)
    )
    ev, g = layout.event_rows, layout.event_group
    residual[ev] += x[ev] - mean_event[g]
    residual[ev] += r[ev, None] * (x[ev] * p["sum_b"][g, None] - delta[g])
    return residual


def _newton(layout, x, ties, max_iterations=50):
    """The Cox model's Newton–Raphson loop (engine.cox.likelihood.maximise) on the weighted
    likelihood; the likelihood's pieces are evaluated once more at the estimate."""
    fit = maximise(
        lambda beta: _likelihood(layout, x, beta, ties), x.shape[1], max_iter=max_iterations
    )
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        terms = _likelihood(layout, x, fit.beta, ties)
    return fit.beta, terms, fit.null_loglik, fit.iterations, fit.converged


@dataclass(frozen=True)
class FineGrayTerm:
    estimate: TermEstimate  # coef, robust se, interval and p-value
    se_model: float


@dataclass(frozen=True)
class FineGrayResult:
    cause: str
    n: int
    events: int  # events of the cause
    competing_events: int
    censored: int
    ties: str
    confidence: float
    terms: tuple[FineGrayTerm, ...]
    wald: object  # ChiSquareTest of all coefficients (robust covariance)
    converged: bool
    iterations: int
    dropped: dict
    warnings: tuple[str, ...]
    design: Design = field(repr=False)
    beta: np.ndarray = field(repr=False)
    covariance: np.ndarray = field(repr=False)  # robust, original units
    baseline_time: np.ndarray = field(repr=False)  # event times of the cause
    baseline_cumulative: np.ndarray = field(repr=False)  # at the covariate means
    events_by_row: np.ndarray = field(repr=False)  # design row order: had the cause
    variance: str = "robust"  # "model" where the sandwich is singular (see the warnings)

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{**vars(t.estimate), "se_model": t.se_model} for t in self.terms])

    def to_dict(self) -> dict:
        return {
            "cause": self.cause,
            "n": int(self.n),
            "events": int(self.events),
            "competing_events": int(self.competing_events),
            "censored": int(self.censored),
            "ties": self.ties,
            "variance": self.variance,
            "terms": [
                {
                    "variable": t.estimate.variable,
                    "level": t.estimate.level,
                    "reference": t.estimate.reference,
                    "coef": json_float(t.estimate.coef),
                    "se": json_float(t.estimate.se),
                    "se_model": json_float(t.se_model),
                    "hazard_ratio": json_float(t.estimate.hazard_ratio),
                    "lower": json_float(t.estimate.lower),
                    "upper": json_float(t.estimate.upper),
                    "p_value": json_float(t.estimate.p_value),
                }
                for t in self.terms
            ],
            "wald": {k: v for k, v in self.wald.to_dict().items() if k != "variable"},
            "converged": bool(self.converged),
            "rows_dropped": {k: int(v) for k, v in self.dropped.items()},
            "warnings": list(self.warnings),
        }

    def forest(self) -> pd.DataFrame:
        """Forest-plot rows (engine.cox.summaries.forest_rows): one per term, and a reference
        row per categorical variable, with the rows and events of the cause in each."""
        from engine.cox.summaries import forest_rows

        estimates = [t.estimate for t in self.terms]
        table = forest_rows(self.design, estimates, self.events_by_row, self.n, self.events)
        return table.to_frame()

    def profile_vector(self, profile: Mapping) -> np.ndarray:
        """The design row of a profile: numeric covariates as given (else at their mean),
        categorical ones at the level given (else the reference)."""
        design = self.design
        unknown = sorted(set(profile) - set(design.variables))
        if unknown:
            raise AnalysisError(
                f"Profile names {preview_values(unknown)}, which are not covariates of the "
                f"Fine–Gray model; its covariates are {preview_values(design.variables, 12)}."
            )
        x = design.center.copy()
        for variable in design.variables:
            if variable not in profile:
                if variable in design.levels:
                    x[design.columns_of(variable)] = 0.0
                continue
            value = profile[variable]
            if variable in design.levels:
                levels = design.levels[variable]
                if str(value) not in levels:
                    raise AnalysisError(
                        f"Profile value {value!r} for '{variable}' is not one of its levels "
                        f"{preview_values(levels, 12)}."
                    )
                for j in design.columns_of(variable):
                    x[j] = float(design.terms[j].level == str(value))
            else:
                x[design.columns_of(variable)[0]] = float(value)
        return x

    def predict_incidence(self, profiles: Mapping[str, Mapping]) -> pd.DataFrame:
        """Predicted cumulative incidence of the cause, 1 - exp(-Lambda0(t) exp(x'b)), for each
        labelled profile, at time 0 and at every event time of the cause."""
        frames = []
        for label, profile in profiles.items():
            x = self.profile_vector(profile)
            risk = float(np.exp((x - self.design.center) @ self.beta))
            frames.append(
                pd.DataFrame(
                    {
                        "profile": label,
                        "time": np.r_[0.0, self.baseline_time],
                        "cumulative_incidence": 1.0
                        - np.exp(-np.r_[0.0, self.baseline_cumulative] * risk),
                    }
                )
            )
        return pd.concat(frames, ignore_index=True)


def fit_fine_gray(
    frame: pd.DataFrame,
    covariates: Sequence[str],
    cause: str,
    *,
    categorical: Sequence[str] = (),
    reference: Mapping[str, object] | None = None,
    ties: str = "efron",
    confidence: float = 0.95,
    max_iterations: int = 50,
) -> FineGrayResult:
    """Fine–Gray model for ``cause`` from a prepared frame with ``_time`` and ``_cause`` (other
    causes compete, None is censored), on the complete cases of the covariates."""
    if ties not in TIES:
        raise AnalysisError(f"Ties method {ties!r} is not known; use 'efron' or 'breslow'.")
    if not 0 < confidence < 1:
        raise AnalysisError(f"Confidence level {confidence!r} must be between 0 and 1.")
    if not covariates:
        raise AnalysisError("The Fine–Gray model needs at least one covariate; choose one or more.")
    if "_cause" not in frame.columns:
        raise AnalysisError(
            "The Fine–Gray model needs named causes: map the event values to causes first "
            "(--competing VALUE=CAUSE, or the Competing risks page)."
        )
    if "_entry" in frame.columns:
        raise AnalysisError(
            "The Fine–Gray model is not available with delayed entry (an entry-time role): its "
            "censoring weights assume everyone is followed from time 0. Remove the entry-time "
            "role to fit it."
        )
    design = build_design(
        frame, covariates, categorical=categorical, reference=reference, required=["_time"]
    )
    used = design.used
    time = frame["_time"].to_numpy(dtype=float)[used]
    codes, names = _cause_codes(frame["_cause"].to_numpy(dtype=object)[used], int(used.sum()))
    if cause not in names:
        raise AnalysisError(
            f"The Fine–Gray cause {cause!r} does not occur in the rows used; the causes are "
            f"{preview_values(names)}. Name one of them."
        )
    target = names.index(cause)
    status = np.where(codes < 0, 0, np.where(codes == target, 1, 2))
    layout = _build_layout(time, status)
    scaled = (design.matrix[layout.order] - design.center) / design.scale
    beta_s, terms, _null, iterations, converged = _newton(layout, scaled, ties, max_iterations)
    try:
        inverse = np.linalg.inv(terms.information)
    except np.linalg.LinAlgError as exc:
        raise AnalysisError(
            "The Fine–Gray model's information matrix is singular: some covariates carry no "
            "information about the events of this cause. Remove covariates with few distinct "
            "values or events."
        ) from exc
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        residuals = _score_residuals(layout, scaled, terms)
    robust_scaled = sandwich(residuals, inverse)
    warnings = list(design.warnings)
    if robust_scaled is None:
        warnings.append(singular_robust_warning(informative_clusters(residuals), len(beta_s)))
    scale = np.outer(design.scale, design.scale)
    beta = beta_s / design.scale
    covariance = (inverse if robust_scaled is None else robust_scaled) / scale
    with np.errstate(invalid="ignore"):  # a variance below zero (a runaway): no se
        se_model = np.sqrt(np.diag(inverse / scale))
    estimates = term_estimates(design.terms, beta, covariance, confidence)
    if not converged:
        warnings.append(
            f"The Fine–Gray fit did not converge after {iterations} iterations; the estimates "
            "may be unreliable. Remove sparse covariates or merge small levels."
        )
    events = int((status == 1).sum())
    p = scaled.shape[1]
    if events / p < 10:
        warnings.append(
            f"Only {events / p:.1f} events of {cause!r} per model parameter: fewer than 10 (a "
            "common rule of thumb); the estimates may be biased. Use fewer covariates."
        )
    # Baseline cumulative subdistribution hazard at the covariate means (Breslow-type).
    with np.errstate(over="ignore", invalid="ignore"):  # a runaway: no finite baseline
        hazard = terms.pieces["sum_a"] * np.exp(-terms.pieces["shift"])
    is_cause_by_row = np.zeros(len(time), dtype=bool)
    is_cause_by_row[layout.order] = layout.is_cause
    return FineGrayResult(
        cause=cause,
        n=int(used.sum()),
        events=events,
        competing_events=int((status == 2).sum()),
        censored=int((status == 0).sum()),
        ties=ties,
        confidence=float(confidence),
        terms=tuple(FineGrayTerm(e, float(s)) for e, s in zip(estimates, se_model, strict=True)),
        wald=chi_square("model", wald_statistic(beta, covariance), p),
        converged=converged,
        iterations=iterations,
        dropped=dict(design.dropped),
        warnings=tuple(warnings),
        design=design,
        beta=beta,
        covariance=covariance,
        baseline_time=layout.group_time,
        baseline_cumulative=np.cumsum(hazard),
        events_by_row=is_cause_by_row,
        variance="model" if robust_scaled is None else "robust",
    )
