"""Accelerated failure time (AFT) models: the parametric families of `parametric` with covariates.

log T = x'beta + sigma W: each covariate stretches or shrinks time, so exp(coefficient) is a
time ratio (above 1: the event comes later). Weibull, log-normal and log-logistic models are
fitted with lifelines' AFT fitters; the exponential model (Weibull with shape fixed at 1) by
Newton–Raphson here, being a Poisson-type likelihood with concave log-likelihood.

Covariates come from the prepared frame: numeric columns as they are, categorical columns
(pandas Categorical, first category the reference) as one indicator per other level, named
like the Cox table's terms: ``column: level vs reference``. Rows missing any model variable are
dropped (complete cases) and counted per variable.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from lifelines import LogLogisticAFTFitter, LogNormalAFTFitter, WeibullAFTFitter
from lifelines.exceptions import ConvergenceError
from scipy.stats import norm

from engine.errors import AnalysisError, RoleError, preview_values
from engine.json_values import frame_records
from engine.parametric.fits import (
    DISTRIBUTIONS,
    PARAMETER_WORDS,
    AICComparison,
    fitting_scale,
    log_cumulative_hazard,
    log_quantile,
    standard_errors,
)
from engine.wording import term_label

# lifelines AFT fitter, its location parameter and its shape parameter (modelled on log scale)
_LIFELINES_AFT = {
    "weibull": (WeibullAFTFitter, "lambda_", "rho_"),
    "log-normal": (LogNormalAFTFitter, "mu_", "sigma_"),
    "log-logistic": (LogLogisticAFTFitter, "alpha_", "beta_"),
}
# log T = x'beta + sigma W, stated once for the AFT table
AFT_PARAMETRISATION = {
    "exponential": "log T = intercept + x'coefficients + W, W standard extreme value (shape 1)",
    "weibull": "S(t | x) = exp(−(t / scale(x))^shape), log scale(x) = intercept + x'coefficients",
    "log-normal": "log T = intercept + x'coefficients + SD × Z, Z standard normal",
    "log-logistic": "S(t | x) = 1 / (1 + (t / scale(x))^shape), log scale(x) = intercept + "
    "x'coefficients",
}


@dataclass(frozen=True)
class Encoding:
    """How one covariate enters the design: numeric, or indicators for non-reference levels."""

    column: str
    levels: tuple[str, ...] | None  # None for numeric; all levels, reference first

    @property
    def terms(self) -> tuple[str, ...]:
        if self.levels is None:
            return (self.column,)
        return tuple(term_label(self.column, lv, self.levels[0]) for lv in self.levels[1:])


def _encodings(frame: pd.DataFrame, covariates) -> tuple[Encoding, ...]:
    out = []
    for name in covariates:
        if name not in frame.columns:
            raise RoleError(
                f"Covariate {name!r} is not a column of the prepared data "
                f"(columns: {preview_values(frame.columns)}).",
                column=name,
            )
        col = frame[name]
        if isinstance(col.dtype, pd.CategoricalDtype):
            out.append(Encoding(name, tuple(str(c) for c in col.cat.categories)))
        elif pd.api.types.is_numeric_dtype(col):
            out.append(Encoding(name, None))
        else:
            raise RoleError(
                f"Covariate {name!r} must be numeric or categorical; it holds "
                f"{preview_values(col.dropna().unique())}. Mark it as categorical.",
                column=name,
            )
    return tuple(out)


def design_matrix(frame: pd.DataFrame, encodings: tuple[Encoding, ...]) -> pd.DataFrame:
    """Numeric design (no intercept) from raw covariate values; NaN where a value is missing."""
    cols = {}
    for enc in encodings:
        values = frame[enc.column]
        if enc.levels is None:
            cols[enc.column] = pd.to_numeric(values, errors="coerce").astype(float)
            continue
        text = values.astype(object).where(values.notna(), None)
        text = text.map(lambda v: None if v is None else str(v))
        unknown = set(text.dropna()) - set(enc.levels)
        if unknown:
            raise RoleError(
                f"Covariate {enc.column!r} has levels the model was not fitted with: "
                f"{preview_values(sorted(unknown))}. Use one of {preview_values(enc.levels)}.",
                column=enc.column,
            )
        for lv, term in zip(enc.levels[1:], enc.terms, strict=True):
            cols[term] = np.where(text.isna(), np.nan, (text == lv).astype(float))
    return pd.DataFrame(cols, index=frame.index)


@dataclass(frozen=True)
class AFTFit:
    """An AFT model: time ratios per term, the shape parameter, fit statistics, predictions."""

    distribution: str
    encodings: tuple[Encoding, ...]
    n: int
    n_events: int
    rows_dropped: int
    missing_by_covariate: dict  # covariate -> rows missing it (among rows otherwise usable)
    max_time: float
    coefficients: pd.DataFrame  # term, coef, std_error, lower, upper, time_ratio(+bounds), p
    ancillary: (
        pd.DataFrame
    )  # parameter (shape, or SD of log time), estimate, std_error, lower, upper
    log_likelihood: float
    aic: float
    confidence_level: float
    rows_time_zero: int = 0  # rows at time 0, left out (no distribution here allows them)

    def _linear_and_shape(self, profiles: pd.DataFrame):
        x = design_matrix(profiles, self.encodings)
        if x.isna().any().any():
            raise AnalysisError("Every profile needs a value for every covariate of the model.")
        coef = self.coefficients.set_index("term")["coef"]
        location = coef["Intercept"] + x.to_numpy() @ coef[list(x.columns)].to_numpy()
        shape = float(self.ancillary["estimate"].iloc[0]) if len(self.ancillary) else 1.0
        return location, shape

    def _theta(self, location: float, shape: float) -> np.ndarray:
        if self.distribution == "exponential":
            return np.array([-location])
        if self.distribution == "log-normal":
            return np.array([location, shape])
        return np.array([np.exp(location), shape])

    def survival(self, profiles: pd.DataFrame, times) -> pd.DataFrame:
        """Predicted survival (point estimates) for each covariate profile (row of ``profiles``)."""
        t = np.asarray(times, dtype=float).reshape(-1)
        locations, shape = self._linear_and_shape(profiles)
        pieces = []
        for i, loc in enumerate(locations):
            surv = np.ones_like(t)
            pos = t > 0
            surv[pos] = np.exp(
                -np.exp(log_cumulative_hazard(self.distribution, self._theta(loc, shape), t[pos]))
            )
            pieces.append(
                pd.DataFrame(
                    {"profile": i, "time": t, "survival": surv, "extrapolated": t > self.max_time}
                )
            )
        return pd.concat(pieces, ignore_index=True)

    def median(self, profiles: pd.DataFrame) -> np.ndarray:
        locations, shape = self._linear_and_shape(profiles)
        return np.array(
            [
                np.exp(log_quantile(self.distribution, self._theta(loc, shape), 0.5))
                for loc in locations
            ]
        )

    def typical_profile(self, frame: pd.DataFrame) -> pd.DataFrame:
        """One row: numeric covariates at their mean, categorical ones at the reference level."""
        row = {
            e.column: (float(frame[e.column].mean()) if e.levels is None else e.levels[0])
            for e in self.encodings
        }
        return pd.DataFrame([row])

    def to_frame(self) -> pd.DataFrame:
        return self.coefficients.copy()

    def to_dict(self) -> dict:
        return {
            "distribution": self.distribution,
            "n": self.n,
            "n_events": self.n_events,
            "rows_dropped": self.rows_dropped,
            "rows_time_zero": self.rows_time_zero,
            "missing_by_covariate": {k: int(v) for k, v in self.missing_by_covariate.items()},
            "log_likelihood": float(self.log_likelihood),
            "aic": float(self.aic),
            "confidence_level": float(self.confidence_level),
            "parametrisation": AFT_PARAMETRISATION[self.distribution],
            "coefficients": frame_records(self.coefficients),
            "ancillary": frame_records(self.ancillary),
        }


def _exponential_newton(x: np.ndarray, event: np.ndarray, exposure: np.ndarray):
    """MLE of log T = x'beta + W (W standard extreme value): hazard exp(-x'beta)."""
    d = event.astype(float)
    beta = np.zeros(x.shape[1])
    beta[0] = np.log(exposure.sum() / d.sum())  # intercept column first

    def loglik(b):
        eta = x @ b
        return float(-(d * eta).sum() - (exposure * np.exp(-eta)).sum())

    current = loglik(beta)
    for _ in range(100):
        mu = exposure * np.exp(-(x @ beta))
        score = x.T @ (mu - d)
        info = (x * mu[:, None]).T @ x
        try:
            step = np.linalg.solve(info, score)
        except np.linalg.LinAlgError as exc:
            raise AnalysisError(
                "The exponential model cannot be fitted: the covariates are collinear or a "
                "level has no events. Remove or merge covariates."
            ) from exc
        factor = 1.0
        while factor > 1e-6:
            proposal = beta + factor * step  # ascent: score = X^T (mu - d)
            value = loglik(proposal)
            if np.isfinite(value) and value >= current - 1e-12:
                break
            factor /= 2
        beta, current = proposal, value
        if np.max(np.abs(factor * step)) < 1e-10:
            break
    mu = exposure * np.exp(-(x @ beta))
    cov = np.linalg.inv((x * mu[:, None]).T @ x)
    return beta, cov, current


def fit_aft(
    frame: pd.DataFrame,
    covariates,
    distribution: str = "weibull",
    *,
    confidence_level: float = 0.95,
) -> AFTFit:
    """Fit an AFT model on the prepared frame (``_time``, ``_event``, optional ``_entry``)."""
    if distribution not in DISTRIBUTIONS:
        raise AnalysisError(f"Unknown distribution {distribution!r}; choose from {DISTRIBUTIONS}.")
    covariates = list(covariates)
    if not covariates:
        raise AnalysisError("An AFT model needs at least one covariate; use the overall fits.")
    encodings = _encodings(frame, covariates)
    x = design_matrix(frame, encodings)
    missing = {c: int(frame[c].isna().sum()) for c in covariates}
    complete = x.notna().all(axis=1).to_numpy()
    # A time of 0 has no density under any of these families: such rows are left out, counted.
    at_zero = complete & (frame["_time"].to_numpy(dtype=float) <= 0)
    keep = complete & ~at_zero
    time = frame["_time"].to_numpy(dtype=float)[keep]
    event = frame["_event"].to_numpy()[keep].astype(bool)
    entry = frame["_entry"].to_numpy(dtype=float)[keep] if "_entry" in frame.columns else None
    x = x[keep]
    if event.sum() <= x.shape[1] + 1:
        raise AnalysisError(
            f"Only {int(event.sum())} events for {x.shape[1]} model terms; the AFT model cannot be "
            "estimated. Use fewer covariates."
        )
    z = float(norm.ppf(0.5 + confidence_level / 2))
    terms = ["Intercept", *x.columns]
    # fitted on time / scale (fits.fitting_scale): a change of time unit only shifts the
    # intercept of log time by log(scale) and divides each event's density by the scale
    scale = fitting_scale(time)
    time, entry = time / scale, None if entry is None else entry / scale
    if distribution == "exponential":
        design = np.column_stack([np.ones(len(x)), x.to_numpy()])
        exposure = time - (0.0 if entry is None else entry)
        beta, cov, log_lik = _exponential_newton(design, event, exposure)
        se = standard_errors(np.diag(cov))
        ancillary = pd.DataFrame(columns=["parameter", "estimate", "std_error", "lower", "upper"])
    else:
        data = x.assign(_time=time, _event=event.astype(int))
        if entry is not None:
            data["_entry"] = entry
        fitter_class, primary, shape_name = _LIFELINES_AFT[distribution]
        fitter = fitter_class()
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fitter.fit(
                    data, "_time", "_event", entry_col="_entry" if entry is not None else None
                )
        except ConvergenceError as exc:
            raise AnalysisError(
                f"The {distribution} AFT model did not converge ({str(exc)[:200]}). Try fewer "
                "covariates, rescale large numeric covariates, or another distribution."
            ) from exc
        params, var = fitter.params_, fitter.variance_matrix_
        index = [(primary, t) for t in terms]
        beta = params.loc[index].to_numpy(dtype=float)
        se = standard_errors(np.diag(var.loc[index, index].to_numpy(dtype=float)))
        a = float(params.loc[(shape_name, "Intercept")])
        a_se = float(standard_errors(var.loc[(shape_name, "Intercept"), (shape_name, "Intercept")]))
        # lifelines models the shape (or SD) on the log scale: shown on its own scale, the
        # interval transformed back and the standard error by the delta method
        with np.errstate(over="ignore", invalid="ignore"):  # a shape beyond floats: not shown
            ancillary = pd.DataFrame(
                [
                    {
                        "parameter": PARAMETER_WORDS[shape_name],
                        "estimate": float(np.exp(a)),
                        "std_error": float(np.exp(a) * a_se),
                        "lower": float(np.exp(a - z * a_se)),
                        "upper": float(np.exp(a + z * a_se)),
                    }
                ]
            )
        log_lik = float(fitter.log_likelihood_)
    beta = beta.copy()
    beta[0] += np.log(scale)
    log_lik -= int(event.sum()) * float(np.log(scale))
    time = time * scale
    # a time ratio beyond floats is infinite (null in the JSON, "not estimable" on the pages);
    # an undefined standard error leaves its interval and p-value undefined, never 0
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        coefs = pd.DataFrame(
            {
                "term": terms,
                "coef": beta,
                "std_error": se,
                "lower": beta - z * se,
                "upper": beta + z * se,
                "time_ratio": np.exp(beta),
                "time_ratio_lower": np.exp(beta - z * se),
                "time_ratio_upper": np.exp(beta + z * se),
                "p_value": 2 * norm.sf(np.abs(beta / se)),
            }
        )
    n_params = len(terms) + len(ancillary)
    return AFTFit(
        distribution=distribution,
        encodings=encodings,
        n=int(keep.sum()),
        n_events=int(event.sum()),
        rows_dropped=int((~complete).sum()),
        rows_time_zero=int(at_zero.sum()),
        missing_by_covariate=missing,
        max_time=float(time.max()),
        coefficients=coefs,
        ancillary=ancillary,
        log_likelihood=float(log_lik),
        aic=float(-2 * log_lik + 2 * n_params),
        confidence_level=float(confidence_level),
    )


@dataclass(frozen=True)
class AFTComparison(AICComparison):
    """AFT models with the same covariates on the same complete cases, compared by AIC."""

    fits: tuple[AFTFit, ...]
    aic_table: pd.DataFrame  # distribution, n_parameters, log_likelihood, aic, delta_aic, note

    def to_dict(self) -> dict:
        return self._table_and_fits()


def compare_aft(
    frame: pd.DataFrame, covariates, distributions=DISTRIBUTIONS, *, confidence_level=0.95
) -> AFTComparison:
    """Fit each family as an AFT model; a family that fails is noted, not fatal."""
    rows, fits = [], []
    for dist in distributions:
        try:
            fit = fit_aft(frame, covariates, dist, confidence_level=confidence_level)
        except AnalysisError as exc:
            rows.append(
                {
                    "distribution": dist,
                    "n_parameters": np.nan,
                    "log_likelihood": np.nan,
                    "aic": np.nan,
                    "note": str(exc),
                }
            )
            continue
        fits.append(fit)
        rows.append(
            {
                "distribution": dist,
                "n_parameters": len(fit.coefficients) + len(fit.ancillary),
                "log_likelihood": fit.log_likelihood,
                "aic": fit.aic,
                "note": None,
            }
        )
    table = pd.DataFrame(rows)
    table["delta_aic"] = table["aic"] - table["aic"].min()
    table = table.sort_values("aic", na_position="last", kind="stable").reset_index(drop=True)
    return AFTComparison(fits=tuple(fits), aic_table=table)
