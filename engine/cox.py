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

from engine.concordance import ConcordanceResult, harrell_c
from engine.cox_design import Design, Term, build_design
from engine.cox_likelihood import TIES, RiskSetLayout, build_layout, newton_raphson
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
    drop_one: tuple[ChiSquareTest, ...]
    iterations: int
    converged: bool
    dropped: dict  # variable -> rows dropped because it was missing
    warnings: tuple[str, ...]
    design: Design = field(repr=False)
    model: FittedModel = field(repr=False)

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([vars(t) for t in self.terms])

    def to_dict(self, ph_check: Sequence[ChiSquareTest] | None = None) -> dict:
        return {
            "n": int(self.n),
            "events": int(self.events),
            "ties": self.ties,
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
            "variable_wald": [t.to_dict() for t in self.variable_wald],
            "drop_one": [t.to_dict() for t in self.drop_one],
            "ph_check": None if ph_check is None else [t.to_dict() for t in ph_check],
            "warnings": list(self.warnings),
        }


_TERM_NUMBERS = ("coef", "se", "hazard_ratio", "lower", "upper", "p_value")


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
    drop_one: bool = True,
    max_iterations: int = 50,
) -> CoxResult:
    """Fit a Cox model by Newton–Raphson on the complete cases of the model's variables."""
    if ties not in TIES:
        raise AnalysisError(f"Ties method {ties!r} is not known; use 'efron' or 'breslow'.")
    if not 0 < confidence < 1:
        raise AnalysisError(f"Confidence level {confidence!r} must be between 0 and 1.")
    if not covariates:
        raise AnalysisError("A Cox model needs at least one covariate; choose one or more.")
    required = [c for c in (time_col, event_col, strata, entry) if c is not None]
    design = build_design(
        frame, covariates, categorical=categorical, reference=reference, required=required
    )
    used = design.used
    time = frame[time_col].to_numpy(dtype=float)[used]
    event = frame[event_col].to_numpy(dtype=float)[used] == 1
    codes, strata_levels = _strata_codes(frame, used, strata)
    entry_values = None if entry is None else frame[entry].to_numpy(dtype=float)[used]
    if entry_values is not None and np.any(entry_values >= time):
        bad = np.flatnonzero(entry_values >= time)
        raise AnalysisError(
            f"Entry time '{entry}' is at or after the exit time in {len(bad)} row(s) (for "
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
    events = int(event.sum())
    beta, covariance, warnings = original_units(fit, design, events)
    terms = term_estimates(design.terms, beta, covariance, confidence)
    eta = scaled @ fit.beta
    concordance = harrell_c(layout.time, layout.event, eta, layout.stratum if strata else None)
    model = FittedModel(
        layout=layout,
        scaled=scaled,
        center=center,
        scale=scale,
        beta=beta,
        covariance=covariance,
        strata_levels=strata_levels,
        used_index=frame.index.to_numpy()[used],
    )
    null_loglik = fit.null_loglik
    drop_tests = tuple(_drop_one(layout, scaled, design, fit, ties) if drop_one else ())
    return CoxResult(
        n=int(used.sum()),
        events=events,
        ties=ties,
        confidence=confidence,
        terms=terms,
        variable_wald=tuple(_variable_wald(design, beta, covariance)),
        likelihood_ratio=chi_square("model", 2 * (fit.loglik - null_loglik), p),
        wald=chi_square("model", fit.beta @ fit.information @ fit.beta, p),
        score=chi_square("model", fit.null_score_statistic, p),
        loglik=fit.loglik,
        null_loglik=null_loglik,
        aic=-2 * fit.loglik + 2 * p,
        concordance=concordance,
        drop_one=drop_tests,
        iterations=fit.iterations,
        converged=fit.converged,
        dropped=dict(design.dropped),
        warnings=tuple(warnings),
        design=design,
        model=model,
    )


def original_units(fit, design: Design, events: int) -> tuple[np.ndarray, np.ndarray, list]:
    """Coefficients and covariance in the covariates' own units, and the fit's warnings (the
    design's, not converged, running off to infinity, few events per parameter)."""
    try:
        cov_scaled = np.linalg.inv(fit.information)
    except np.linalg.LinAlgError as exc:
        raise AnalysisError(
            "The Cox model's information matrix is singular: some covariates carry no "
            "information about the events. Remove covariates with few distinct values or events."
        ) from exc
    scale = design.scale
    p = len(scale)
    beta = fit.beta / scale
    covariance = cov_scaled / np.outer(scale, scale)
    warnings = list(design.warnings)
    if not fit.converged:
        warnings.append(
            f"The fit did not converge after {fit.iterations} iterations; the estimates may be "
            "unreliable. Remove sparse covariates or merge small levels."
        )
    runaway = [design.terms[j].label for j in np.flatnonzero(np.abs(fit.last_step) > RUNAWAY_STEP)]
    if runaway:
        warnings.append(
            f"Coefficient(s) for {', '.join(runaway)} run off to infinity (monotone likelihood, "
            "e.g. a level with no events or a covariate that separates events perfectly); their "
            "hazard ratios and tests are not meaningful. Merge or remove those levels."
        )
    if events / p < EVENTS_PER_PARAMETER:
        warnings.append(
            f"Only {events / p:.1f} events per model parameter ({events} events, {p} parameters): "
            f"fewer than {EVENTS_PER_PARAMETER} (a common rule of thumb, after Peduzzi et al. "
            "1995); the estimates may be biased and the tests unreliable. Use fewer covariates."
        )
    return beta, covariance, warnings


def term_estimates(terms: Sequence[Term], beta, covariance, confidence):
    se = np.sqrt(np.diag(covariance))
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
            )
            for j, t in enumerate(terms)
        )
    return rows


def _variable_wald(design: Design, beta, covariance):
    for variable in design.levels:
        cols = design.columns_of(variable)
        if len(cols) > 1:
            b = beta[cols]
            statistic = b @ np.linalg.solve(covariance[np.ix_(cols, cols)], b)
            yield chi_square(variable, statistic, len(cols))


def _drop_one(layout, scaled, design: Design, fit, ties):
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
    ``cox_diagnostics.PHTest`` (its per-variable and GLOBAL rows are used) or those rows."""
    if result is None:
        return None
    return result.to_dict(getattr(ph_check, "checks", ph_check))
