"""Cox proportional-hazards regression: fit, whole-model and per-variable tests, warnings.

The design is centred and scaled before fitting (which leaves the likelihood unchanged and keeps
exp() in range); coefficients and their covariance are transformed back to the original units.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from engine.cox.concordance import ConcordanceResult, harrell_c
from engine.cox.design import Design, Term, build_design, within_strata_constant, without_terms
from engine.cox.likelihood import (
    TIES,
    RiskSetLayout,
    build_layout,
    newton_raphson,
    score_residuals,
)
from engine.errors import AnalysisError, preview_values
from engine.json_values import json_float

EVENTS_PER_PARAMETER = 10  # common practice, after Peduzzi et al. (1995) for Cox models
RUNAWAY_STEP = 1e-4  # a Newton step still this large (scaled units) at the optimum: monotone


@dataclass(frozen=True)
class TermEstimate:
    variable: str
    level: str | None
    reference: str | None
    coef: float
    se: float
    hazard_ratio: float
    lower: float
    upper: float
    z: float
    p_value: float
    se_model: float  # the model-based (inverse information) SE; equals se unless robust


@dataclass(frozen=True)
class ChiSquareTest:
    variable: str
    statistic: float
    df: int
    p_value: float

    def to_dict(self) -> dict:
        return {
            "variable": self.variable,
            "statistic": json_float(self.statistic),
            "df": int(self.df),
            "p_value": json_float(self.p_value),
        }


@dataclass(frozen=True)
class FittedModel:
    """What the diagnostics and predictions need: sorted layout, scaled design, estimates."""

    layout: RiskSetLayout
    scaled: np.ndarray  # centred and scaled design in layout (sorted) order
    center: np.ndarray
    scale: np.ndarray
    beta: np.ndarray  # original units
    covariance: np.ndarray  # original units
    strata_levels: tuple
    used_index: np.ndarray  # frame index labels of the rows used, in the frame's order
    entry: np.ndarray | None = None  # entry times in layout (sorted) order, with delayed entry
    robust_covariance: np.ndarray | None = None  # original units; None for model variance


@dataclass(frozen=True)
class CoxResult:
    n: int
    events: int
    ties: str
    confidence: float
    terms: tuple[TermEstimate, ...]
    variable_wald: tuple[ChiSquareTest, ...]  # joint Wald test per multi-level categorical
    likelihood_ratio: ChiSquareTest
    wald: ChiSquareTest
    score: ChiSquareTest
    loglik: float
    null_loglik: float
    aic: float
    concordance: ConcordanceResult
    without_each: tuple[ChiSquareTest, ...]  # likelihood-ratio test of removing each variable
    iterations: int
    converged: bool
    dropped: dict  # variable -> rows dropped because it was missing
    warnings: tuple[str, ...]
    design: Design = field(repr=False)
    model: FittedModel = field(repr=False)
    variance: str = "model"  # "model" (inverse information) or "robust" (sandwich by cluster)
    clusters: int | None = None  # number of clusters of the robust variance
    not_estimable: tuple[str, ...] = ()  # terms left out: constant within every stratum

    @property
    def covariance(self) -> np.ndarray:
        """The coefficients' covariance the terms and Wald tests use (robust when chosen)."""
        if self.model.robust_covariance is not None:
            return self.model.robust_covariance
        return self.model.covariance

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([vars(t) for t in self.terms])

    def to_dict(self, ph_check: Mapping | None = None) -> dict:
        """JSON-ready; ``ph_check`` is ``cox_diagnostics.PHTest.to_dict()`` (or None)."""
        return {
            "n": int(self.n),
            "events": int(self.events),
            "ties": self.ties,
            "variance": self.variance,
            "clusters": None if self.clusters is None else int(self.clusters),
            "terms": [
                {
                    "variable": t.variable,
                    "level": t.level,
                    "reference": t.reference,
                    **{k: json_float(getattr(t, k)) for k in _TERM_NUMBERS},
                }
                for t in self.terms
            ],
            "likelihood_ratio": _test_dict(self.likelihood_ratio),
            "wald": _test_dict(self.wald),
            "score": _test_dict(self.score),
            "aic": json_float(self.aic),
            "concordance": json_float(self.concordance.concordance),
            "concordance_se": json_float(self.concordance.standard_error),
            "rows_dropped": {k: int(v) for k, v in self.dropped.items()},
            "not_estimable": list(self.not_estimable),
            "variable_wald": [t.to_dict() for t in self.variable_wald],
            "without_each": [t.to_dict() for t in self.without_each],
            "ph_check": None if ph_check is None else dict(ph_check),
            "warnings": list(self.warnings),
        }


_TERM_NUMBERS = ("coef", "se", "se_model", "hazard_ratio", "lower", "upper", "p_value")
VARIANCES = ("auto", "model", "robust")


def _test_dict(test: ChiSquareTest) -> dict:
    out = test.to_dict()
    del out["variable"]
    return out


def chi_square(variable: str, statistic: float, df: int) -> ChiSquareTest:
    statistic = max(float(statistic), 0.0)
    return ChiSquareTest(variable, statistic, int(df), float(stats.chi2.sf(statistic, df)))


def _strata_codes(frame, used, strata):
    if strata is None:
        return None, ()
    values = pd.Categorical(frame[strata].to_numpy()[used])
    return values.codes.astype(np.int64), tuple(str(c) for c in values.categories)


def drop_not_estimable(
    design: Design, constant: Sequence[int], strata: str
) -> tuple[Design, tuple[str, ...]]:
    """The design without the terms ``constant`` (they do not vary within any stratum of
    ``strata``) and their labels; an error when that leaves no term."""
    if not constant:
        return design, ()
    labels = tuple(design.terms[j].label for j in constant)
    if len(constant) == len(design.terms):
        raise AnalysisError(
            f"Every covariate term ({preview_values(labels)}) takes a single value within each "
            f"stratum of '{strata}', so a model stratified by '{strata}' cannot estimate any of "
            "them. Drop the strata, or choose covariates that vary within strata."
        )
    return without_terms(design, constant), labels


SINGULAR_INFORMATION = (
    "The Cox model's information matrix is singular: some covariates carry no "
    "information about the events. Remove covariates with few distinct values or events."
)


def runaway_terms(fit) -> np.ndarray:
    """Per term, whether its coefficient runs off to infinity: a large last Newton step, or no
    curvature left at the estimate (the information of a monotone likelihood falls to zero,
    and rounding may leave it at or below zero). Such a term has no standard error, p-value or
    interval (``term_estimates``), only the warning of ``fit_warnings``."""
    return (np.abs(fit.last_step) > RUNAWAY_STEP) | ~(np.diag(fit.information) > 0)


def fit_warnings(
    design: Design,
    fit,
    events: int,
    not_estimable: Sequence[str] = (),
    strata: str | None = None,
) -> tuple[list[str], bool]:
    """The warnings of a fitted Cox model (the design's own, terms left out, no convergence,
    runaway coefficients, events per parameter) and whether any estimate is finite; ``fit`` is
    a ``cox_likelihood`` fit (``converged``, ``iterations``, ``last_step``). Shared by the fit
    from rows and the fit from per-time sums so both say the same."""
    p = len(design.terms)
    warnings = list(design.warnings)
    if not_estimable:
        warnings.append(
            f"Covariate term(s) {preview_values(not_estimable)} take a single value within every "
            f"stratum of '{strata}', so the stratified model cannot estimate their effect; they "
            "are left out of the model and of its tests' degrees of freedom."
        )
    if not fit.converged:
        warnings.append(
            f"The fit did not converge after {fit.iterations} iterations; the estimates may be "
            "unreliable. Remove sparse covariates or merge small levels."
        )
    runaway = [design.terms[j].label for j in np.flatnonzero(runaway_terms(fit))]
    if runaway:
        warnings.append(
            f"Coefficient(s) for {', '.join(runaway)} run off to infinity (monotone likelihood, "
            "e.g. a level with no events or a covariate that separates events perfectly); their "
            "hazard ratios and tests are not meaningful. Merge or remove those levels."
        )
    finite_estimates = len(runaway) < p
    if not finite_estimates:
        warnings.append(
            "The likelihood-ratio and Wald tests of the whole model are not reported: every "
            "coefficient runs off to infinity, so there is no finite estimate to test. The score "
            "test, computed at zero, still holds."
        )
    if events / p < EVENTS_PER_PARAMETER:
        warnings.append(
            f"Only {events / p:.1f} events per model parameter ({events} events, {p} parameters): "
            f"fewer than {EVENTS_PER_PARAMETER} (a common rule of thumb, after Peduzzi et al. "
            "1995); the estimates may be biased and the tests unreliable. Use fewer covariates."
        )
    return warnings, finite_estimates


def fit_cox(
    frame: pd.DataFrame,
    covariates: Sequence[str],
    *,
    categorical: Sequence[str] = (),
    reference: Mapping[str, object] | None = None,
    strata: str | None = None,
    ties: str = "efron",
    entry: str | None = None,
    confidence: float = 0.95,
    time_col: str = "_time",
    event_col: str = "_event",
    without_each: bool = True,
    max_iterations: int = 50,
    clusters: str | None = None,
    variance: str = "auto",
    strata_name: str | None = None,
) -> CoxResult:
    """Fit a Cox model by Newton–Raphson on the complete cases of the model's variables.

    ``variance``: "model" (inverse information), "robust" (the sandwich of Lin and Wei 1989,
    summed within the ``clusters`` column's values, or per row without one) or "auto": robust
    when the ``clusters`` column repeats a value among the rows used (several rows per subject:
    episodes or recurrent events), else model-based. ``strata_name``: what the messages call
    the strata (the user's column when ``strata`` is a working column).
    """
    if variance not in VARIANCES:
        raise AnalysisError(f"Variance {variance!r} is not known; use 'auto', 'model' or 'robust'.")
    if ties not in TIES:
        raise AnalysisError(f"Ties method {ties!r} is not known; use 'efron' or 'breslow'.")
    if not 0 < confidence < 1:
        raise AnalysisError(f"Confidence level {confidence!r} must be between 0 and 1.")
    if not covariates:
        raise AnalysisError("A Cox model needs at least one covariate; choose one or more.")
    required = [c for c in (time_col, event_col, strata, entry, clusters) if c is not None]
    design = build_design(
        frame, covariates, categorical=categorical, reference=reference, required=required
    )
    used = design.used
    time = frame[time_col].to_numpy(dtype=float)[used]
    event = frame[event_col].to_numpy(dtype=float)[used] == 1
    codes, strata_levels = _strata_codes(frame, used, strata)
    not_estimable: tuple[str, ...] = ()
    if codes is not None:
        strata_name = strata if strata_name is None else strata_name
        constant = within_strata_constant(design, codes)
        design, not_estimable = drop_not_estimable(design, constant, strata_name)
    entry_values = None if entry is None else frame[entry].to_numpy(dtype=float)[used]
    if entry_values is not None and np.any(entry_values >= time):
        bad = np.flatnonzero(entry_values >= time)
        raise AnalysisError(
            f"The entry time is at or after the exit time in {len(bad)} row(s) (for "
            f"example rows {preview_values(frame.index[used][bad])}); a subject must enter "
            "before it leaves. Fix or remove those rows."
        )
    if not event.any():
        raise AnalysisError(
            "None of the rows used by the Cox model has an event, so nothing can be estimated; "
            "check the event coding."
        )
    layout = build_layout(time, event, codes, entry_values)
    center, scale = design.center, design.scale
    scaled = (design.matrix[layout.order] - center) / scale
    fit = newton_raphson(layout, scaled, ties, max_iter=max_iterations)
    p = scaled.shape[1]
    try:
        cov_scaled = np.linalg.inv(fit.information)
    except np.linalg.LinAlgError as exc:
        raise AnalysisError(SINGULAR_INFORMATION) from exc
    beta = fit.beta / scale
    covariance = cov_scaled / np.outer(scale, scale)
    events = int(event.sum())
    warnings, finite_estimates = fit_warnings(design, fit, events, not_estimable, strata_name)
    no_test = ChiSquareTest("model", float("nan"), p, float("nan"))
    cluster_codes = _cluster_codes(frame, used, clusters, variance)
    robust = None
    if cluster_codes is not None:
        scores = cluster_scores(layout, scaled, fit.beta, ties, cluster_codes)
        robust = sandwich(scores, cov_scaled)
        if robust is None:
            warnings.append(singular_robust_warning(informative_clusters(scores), p))
            cluster_codes = None
        else:
            robust = robust / np.outer(scale, scale)
    runaway = runaway_terms(fit)
    terms = term_estimates(design.terms, beta, covariance, confidence, robust, runaway)
    eta = scaled @ fit.beta
    subjects = None if clusters is None else pd.factorize(frame[clusters].to_numpy()[used])[0]
    concordance = harrell_c(
        layout.time,
        layout.event,
        eta,
        layout.stratum if strata else None,
        entry=None if entry_values is None else entry_values[layout.order],
        clusters=None if subjects is None else subjects[layout.order],
    )
    model = FittedModel(
        layout=layout,
        scaled=scaled,
        center=center,
        scale=scale,
        beta=beta,
        covariance=covariance,
        strata_levels=strata_levels,
        used_index=frame.index.to_numpy()[used],
        entry=None if entry_values is None else entry_values[layout.order],
        robust_covariance=robust,
    )
    null_loglik = fit.null_loglik
    removal_tests = tuple(_without_each(layout, scaled, design, fit, ties) if without_each else ())
    return CoxResult(
        n=int(used.sum()),
        events=events,
        ties=ties,
        confidence=confidence,
        terms=terms,
        variable_wald=tuple(
            _variable_wald(design, beta, covariance if robust is None else robust, runaway)
        ),
        likelihood_ratio=chi_square("model", 2 * (fit.loglik - null_loglik), p)
        if finite_estimates
        else no_test,
        wald=chi_square(
            "model",
            fit.beta @ fit.information @ fit.beta
            if robust is None
            else wald_statistic(beta, robust),
            p,
        )
        if finite_estimates
        else no_test,
        score=chi_square("model", fit.null_score_statistic, p),
        loglik=fit.loglik,
        null_loglik=null_loglik,
        aic=-2 * fit.loglik + 2 * p,
        concordance=concordance,
        without_each=removal_tests,
        iterations=fit.iterations,
        converged=fit.converged,
        dropped=dict(design.dropped),
        warnings=tuple(warnings),
        design=design,
        model=model,
        variance="model" if robust is None else "robust",
        clusters=None if cluster_codes is None else int(cluster_codes.max()) + 1,
        not_estimable=not_estimable,
    )


def _cluster_codes(frame, used, clusters, variance) -> np.ndarray | None:
    """Cluster code per used row (frame order) for the robust variance, or None for the model's."""
    if variance == "model" or (variance == "auto" and clusters is None):
        return None
    if clusters is None:
        return np.arange(int(used.sum()))
    codes, _ = pd.factorize(frame[clusters].to_numpy()[used])
    if variance == "auto" and codes.max() + 1 == len(codes):
        return None  # every subject has one row: the model's variance
    return codes


def singular_robust_warning(n_clusters: int, terms: int) -> str:
    """Why the robust variance was not used (``n_clusters``: those adding to the score)."""
    if n_clusters <= terms:
        why = (
            f"needs more clusters than model terms, and there are {n_clusters} cluster(s) "
            "(distinct ids, or rows without an id role; counting those with rows at risk at "
            f"some event time) for {terms} term(s)"
        )
    else:
        why = (
            f"cannot be used here: the score sums of the {n_clusters} clusters vary in fewer "
            f"directions than the {terms} model terms (a level found in too few clusters, for "
            "example), or a coefficient running off to infinity leaves them undefined"
        )
    return (
        f"The robust (sandwich) variance {why}, so its covariance would be singular. The "
        "standard errors, intervals and tests shown are model-based, which treat the rows as "
        "independent. Use more subjects or fewer covariate terms for a robust variance."
    )


def cluster_scores(layout, scaled, beta, ties, codes) -> np.ndarray:
    """Per cluster (``codes``: cluster per row in the frame's order), the sum of its rows' score
    residuals (clusters x terms, scaled units). A coefficient running off to infinity can leave
    risk sets of zero weight, whose residuals are NaN."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        residuals = score_residuals(layout, scaled, beta, ties)
    sorted_codes = codes[layout.order]
    n_clusters = int(codes.max()) + 1
    return np.column_stack(
        [np.bincount(sorted_codes, residuals[:, j], n_clusters) for j in range(scaled.shape[1])]
    )


def informative_clusters(scores: np.ndarray) -> int:
    """Clusters that add to the score: a cluster whose rows are at risk at no event time has a
    score sum of exactly zero."""
    return int(np.any(scores != 0, axis=1).sum())


def sandwich(scores: np.ndarray, information_inverse: np.ndarray) -> np.ndarray | None:
    """I^-1 (sum over clusters of U_c U_c') I^-1 from the clusters' score sums U_c (Lin and Wei
    1989), or None when it is singular or undefined. The sums add up to the score, zero at the
    estimate, so they span at most (clusters adding to the score - 1) directions: with no more
    such clusters than terms the sandwich is always singular."""
    p = scores.shape[1]
    if (
        informative_clusters(scores) <= p
        or not np.isfinite(scores).all()
        or np.linalg.matrix_rank(scores) < p
    ):
        return None
    return information_inverse @ (scores.T @ scores) @ information_inverse


def term_estimates(terms: Sequence[Term], beta, covariance, confidence, robust=None, runaway=None):
    """The terms' estimates; a term in ``runaway`` (``runaway_terms``) keeps its coefficient
    and hazard ratio where the fit stopped, with no standard error, z, p-value or interval
    (NaN: null in the JSON, "not estimable" in the text, pages and report)."""
    with np.errstate(invalid="ignore"):  # a variance below zero (a runaway): no se
        se_model = np.sqrt(np.diag(covariance))
        se = se_model if robust is None else np.sqrt(np.diag(robust))
    if runaway is not None and np.any(runaway):
        se_model = np.where(runaway, np.nan, se_model)
        se = np.where(runaway, np.nan, se)
    quantile = stats.norm.ppf(0.5 + confidence / 2)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        z = beta / se
        rows = tuple(
            TermEstimate(
                variable=t.variable,
                level=t.level,
                reference=t.reference,
                coef=float(beta[j]),
                se=float(se[j]),
                hazard_ratio=float(np.exp(beta[j])),
                lower=float(np.exp(beta[j] - quantile * se[j])),
                upper=float(np.exp(beta[j] + quantile * se[j])),
                z=float(z[j]),
                p_value=float(2 * stats.norm.sf(abs(z[j]))),
                se_model=float(se_model[j]),
            )
            for j, t in enumerate(terms)
        )
    return rows


def wald_statistic(beta, covariance) -> float:
    """b' V^-1 b; NaN (reported as not computed) when V is singular."""
    try:
        return float(beta @ np.linalg.solve(covariance, beta))
    except np.linalg.LinAlgError:
        return float("nan")


def _variable_wald(design: Design, beta, covariance, runaway=None):
    """The joint Wald test of each categorical variable of several terms; none for a variable
    with a term that runs off to infinity (its test is not meaningful)."""
    for variable in design.levels:
        cols = design.columns_of(variable)
        if runaway is not None and np.any(np.asarray(runaway)[cols]):
            continue
        if len(cols) > 1:
            b = beta[cols]
            statistic = wald_statistic(b, covariance[np.ix_(cols, cols)])
            yield chi_square(variable, statistic, len(cols))


def _without_each(layout, scaled, design: Design, fit, ties):
    """Likelihood-ratio test of each variable: refit without it on the same rows (starting from
    the full model's other coefficients, which saves iterations)."""
    for variable in design.variables:
        cols = design.columns_of(variable)
        keep = np.setdiff1d(np.arange(scaled.shape[1]), cols)
        if len(keep) == 0:
            reduced = fit.null_loglik
        else:
            reduced = newton_raphson(layout, scaled[:, keep], ties, start=fit.beta[keep]).loglik
        yield chi_square(variable, 2 * (fit.loglik - reduced), len(cols))


def cox_json(result: CoxResult | None, ph_check=None):
    """The command line's "cox" object, or None without a model. ``ph_check`` is a
    ``cox_diagnostics.PHTest`` (or its ``to_dict()``)."""
    if result is None:
        return None
    if ph_check is not None and not isinstance(ph_check, Mapping):
        ph_check = ph_check.to_dict()
    return result.to_dict(ph_check)
