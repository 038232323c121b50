"""Parametric survival models: exponential, Weibull, log-normal and log-logistic fits.

Overall fits (right-censored, delayed entry allowed) come with an AIC table, fitted survival on a
time grid that may run past the follow-up (rows beyond the last observed time are marked as
extrapolation: they rest on the model's shape alone, not on data), and the median and survival at
chosen times with intervals. With covariates the same families are fitted as accelerated failure
time (AFT) models, whose exponentiated coefficients are time ratios.

Computation: the exponential fit is closed form (rate = events / total time at risk; the standard
error of log rate is 1 / sqrt(events)). The other three use lifelines' univariate fitters
(WeibullFitter, LogNormalFitter, LogLogisticFitter) and AFT fitters; the exponential AFT model is
fitted here by Newton–Raphson (it is the Weibull AFT model with shape fixed at 1).

Intervals: delta method with the fit's covariance matrix, for log cumulative hazard (survival
bounds exp(-exp(.)) stay within (0, 1)) and for log median (bounds stay positive).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from lifelines import LogLogisticFitter, LogNormalFitter, WeibullFitter
from lifelines.exceptions import ConvergenceError
from scipy.stats import norm

from engine.errors import AnalysisError, NoRowsError, every_group_missing, preview_values
from engine.json_values import frame_records

DISTRIBUTIONS: tuple[str, ...] = ("exponential", "weibull", "log-normal", "log-logistic")
LABELS = {
    "exponential": "Exponential",
    "weibull": "Weibull",
    "log-normal": "Log-normal",
    "log-logistic": "Log-logistic",
}
# How each family's parameters are defined (stated once, beside the parameter names in words).
PARAMETRISATION = {
    "exponential": "S(t) = exp(−rate × t)",
    "weibull": "S(t) = exp(−(t / scale)^shape)",
    "log-normal": "log T is normal with the mean and SD of log time: "
    "S(t) = 1 − Φ((log t − mean) / SD)",
    "log-logistic": "S(t) = 1 / (1 + (t / scale)^shape)",
}
_UNIVARIATE = {
    "weibull": WeibullFitter,
    "log-normal": LogNormalFitter,
    "log-logistic": LogLogisticFitter,
}
# lifelines' parameter names -> Hazel's words (the order of theta is lifelines')
PARAMETER_WORDS = {
    "lambda_": "scale",
    "rho_": "shape",
    "mu_": "mean of log time",
    "sigma_": "SD of log time",
    "alpha_": "scale",
    "beta_": "shape",
}
LN2 = float(np.log(2.0))
# The parameter of each two-parameter family that carries the time scale, and how a change of
# time unit acts on it (theta in lifelines' order): a scale is multiplied, a mean of log time
# shifted. The shape (or SD of log time) does not change.
TIME_SCALE_PARAMETER = {"weibull": "multiply", "log-logistic": "multiply", "log-normal": "shift"}


class FamilyNotEstimable(AnalysisError):
    """One family cannot be fitted to these times (listed among the failed fits, not fatal)."""


FITTING_RANGE_EXPONENT = 16  # median times within 2^-16 .. 2^16 are fitted as they are


def fitting_scale(time: np.ndarray) -> float:
    """1, or for a median time outside 2^-16 .. 2^16 (about 1.5e-5 to 65,536) the power of two
    nearest to it: the fits then run on time / scale, so that times of 1e30 or 1e-30 reach the
    optimiser near 1 (its tolerances and starting values assume it; unscaled, lifelines stops
    at its starting values or at a false maximum there) and dividing by it is exact. Every
    family here is equivariant under a change of time unit, so the estimates are mapped back
    exactly."""
    positive = time[np.isfinite(time) & (time > 0)]
    if not positive.size:
        return 1.0
    exponent = float(np.round(np.log2(np.median(positive))))
    if abs(exponent) <= FITTING_RANGE_EXPONENT:
        return 1.0
    scale = float(2.0 ** np.clip(exponent, -1000, 1000))
    with np.errstate(over="ignore", under="ignore"):
        scaled = positive / scale
    if not (scaled.min() > 0 and np.isfinite(scaled.max())):
        raise AnalysisError(
            f"The times range from {positive.min():g} to {positive.max():g}: too wide for a "
            "parametric fit (brought near 1, the extreme ones fall outside the range of "
            "numbers). Check the time column for a wrong unit or a stray value."
        )
    return scale


def theta_in_time_unit(distribution: str, theta, cov, scale: float):
    """Parameters and covariance fitted on time / scale, in the unit of time itself."""
    theta, cov = np.array(theta, dtype=float), np.array(cov, dtype=float)
    if TIME_SCALE_PARAMETER[distribution] == "shift":
        theta[0] += np.log(scale)
        return theta, cov
    factor = np.ones(theta.shape[0])
    factor[0] = scale
    with np.errstate(over="ignore"):  # a variance past the float range is infinite: null in JSON
        return theta * factor, cov * np.outer(factor, factor)


# --- each family as functions of its parameter vector (theta in lifelines' order) -------------


def log_cumulative_hazard(distribution: str, theta: np.ndarray, t: np.ndarray) -> np.ndarray:
    """log H(t) for t > 0."""
    log_t = np.log(t)
    if distribution == "exponential":  # theta = (log rate,)
        return log_t + theta[0]
    if distribution == "weibull":  # (lambda_ scale, rho_ shape): H = (t / lambda)^rho
        return theta[1] * (log_t - np.log(theta[0]))
    if distribution == "log-normal":  # (mu_, sigma_): S = 1 - Phi((log t - mu) / sigma)
        return np.log(-norm.logsf((log_t - theta[0]) / theta[1]))
    # log-logistic (alpha_ scale, beta_ shape): S = 1 / (1 + (t / alpha)^beta)
    return np.log(np.logaddexp(0.0, theta[1] * (log_t - np.log(theta[0]))))


def log_quantile(distribution: str, theta: np.ndarray, p: float) -> float:
    """log of the time by which a share p has had the event (p = 0.5: the median)."""
    h = -np.log1p(-p)  # cumulative hazard at that time
    if distribution == "exponential":
        return np.log(h) - theta[0]
    if distribution == "weibull":
        return np.log(theta[0]) + np.log(h) / theta[1]
    if distribution == "log-normal":
        return theta[0] + theta[1] * norm.ppf(p)
    return np.log(theta[0]) + np.log(p / (1 - p)) / theta[1]


def standard_errors(variances) -> np.ndarray:
    """Square roots of the variances; NaN (not estimable) where a variance is not a positive
    finite number, as a fit at the edge of its range gives: never a standard error of 0 that
    would make a p-value of 0 and an interval of no width."""
    variances = np.asarray(variances, dtype=float)
    usable = np.isfinite(variances) & (variances > 0)
    return np.sqrt(np.where(usable, variances, np.nan))


def _delta_se(fn, theta: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """Delta-method standard error of fn(theta) (vectorised output) by central differences."""
    grads = []
    for i in range(theta.shape[0]):
        step = 1e-6 * max(1.0, abs(theta[i]))
        up, down = theta.copy(), theta.copy()
        up[i] += step
        down[i] -= step
        grads.append((np.asarray(fn(up)) - np.asarray(fn(down))) / (2 * step))
    g = np.stack(grads, axis=-1)
    return np.sqrt(np.maximum(np.einsum("...i,ij,...j->...", g, cov, g), 0.0))


# --- results --------------------------------------------------------------------------------


@dataclass(frozen=True)
class ParametricFit:
    """One family fitted to one set of subjects; ``parameters`` named in words (``PARAMETER_WORDS``,
    defined by ``PARAMETRISATION``)."""

    distribution: str
    group: str | None
    n: int
    n_events: int
    max_time: float  # last observed time: survival beyond it is extrapolation
    theta: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    parameters: pd.DataFrame  # parameter, estimate, std_error, lower, upper
    log_likelihood: float
    aic: float
    confidence_level: float

    def _z(self) -> float:
        return float(norm.ppf(0.5 + self.confidence_level / 2))

    def survival(self, times) -> pd.DataFrame:
        """Fitted survival with pointwise bounds; ``extrapolated`` marks times past follow-up."""
        t = np.asarray(times, dtype=float).reshape(-1)
        theta, cov = np.array(self.theta), np.array(self.covariance)
        positive = t > 0
        tp = t[positive]
        fn = lambda th: log_cumulative_hazard(self.distribution, th, tp)  # noqa: E731
        log_h = fn(theta)
        se = _delta_se(fn, theta, cov)
        z = self._z()
        surv, lower, upper = np.ones_like(t), np.ones_like(t), np.ones_like(t)
        surv[positive] = np.exp(-np.exp(log_h))
        lower[positive] = np.exp(-np.exp(log_h + z * se))
        upper[positive] = np.exp(-np.exp(log_h - z * se))
        return pd.DataFrame(
            {
                "distribution": self.distribution,
                "group": self.group,
                "time": t,
                "survival": surv,
                "lower": lower,
                "upper": upper,
                "extrapolated": t > self.max_time,
            }
        )

    def quantile(self, p: float = 0.5) -> dict:
        """Time by which a share ``p`` has had the event (default the median), with interval."""
        if not 0 < p < 1:
            raise AnalysisError(f"The quantile share must lie in (0, 1); got {p!r}.")
        theta, cov = np.array(self.theta), np.array(self.covariance)
        fn = lambda th: log_quantile(self.distribution, th, p)  # noqa: E731
        centre = float(fn(theta))
        se = float(_delta_se(fn, theta, cov))
        z = self._z()
        estimate = float(np.exp(centre))
        return {
            "distribution": self.distribution,
            "group": self.group,
            "share": float(p),
            "time": estimate,
            "lower": float(np.exp(centre - z * se)),
            "upper": float(np.exp(centre + z * se)),
            "extrapolated": bool(estimate > self.max_time),
        }

    def to_frame(self) -> pd.DataFrame:
        return self.parameters.assign(distribution=self.distribution, group=self.group)

    def to_dict(self) -> dict:
        return {
            "distribution": self.distribution,
            "group": self.group,
            "n": self.n,
            "n_events": self.n_events,
            "max_time": float(self.max_time),
            "log_likelihood": float(self.log_likelihood),
            "aic": float(self.aic),
            "confidence_level": float(self.confidence_level),
            "parametrisation": PARAMETRISATION[self.distribution],
            "parameters": frame_records(self.parameters),
        }


class AICComparison:
    """What comparisons of fitted families share: the AIC table is their tidy view, and their
    JSON starts with it and the fits."""

    aic_table: pd.DataFrame
    fits: tuple

    def to_frame(self) -> pd.DataFrame:
        return self.aic_table.copy()

    def _table_and_fits(self) -> dict:
        return {
            "aic_table": frame_records(self.aic_table),
            "fits": [f.to_dict() for f in self.fits],
        }


@dataclass(frozen=True)
class ParametricComparison(AICComparison):
    """Several families fitted to the same data (per group when split), compared by AIC."""

    fits: tuple[ParametricFit, ...]
    failed: tuple[tuple[str, str | None, str], ...]  # (distribution, group, reason)
    aic_table: pd.DataFrame  # group, distribution, n_parameters, log_likelihood, aic, delta_aic
    curves: pd.DataFrame  # ParametricFit.survival rows for every fit on the grid
    estimates: pd.DataFrame  # median and survival at chosen times, with intervals
    rows_time_zero: int = 0  # rows at time 0 left out by fit_parametric (no density at 0)

    def fit(self, distribution: str, group: str | None = None) -> ParametricFit:
        for f in self.fits:
            if f.distribution == distribution and f.group == group:
                return f
        raise AnalysisError(f"No {distribution!r} fit for group {group!r} in this comparison.")

    def to_dict(self) -> dict:
        return {
            **self._table_and_fits(),
            "failed": [{"distribution": d, "group": g, "reason": r} for d, g, r in self.failed],
            "curves": frame_records(self.curves),
            "estimates": frame_records(self.estimates),
            "rows_time_zero": self.rows_time_zero,
        }


# --- fitting --------------------------------------------------------------------------------


def _check_times(time, event, entry):
    time = np.asarray(time, dtype=np.float64).reshape(-1)
    event = np.asarray(event).reshape(-1)
    if time.shape[0] != event.shape[0]:
        raise AnalysisError(
            f"There are {time.shape[0]} times but {event.shape[0]} event indicators; give one "
            "of each per row."
        )
    bad = ~np.isfinite(time) | (time <= 0)
    if bad.any():
        raise AnalysisError(
            f"Parametric models need times > 0; {int(bad.sum())} row(s) have other times "
            f"({preview_values(time[bad])}). Exclude them or correct the times."
        )
    if not np.isin(event, (0, 1, True, False)).all():
        raise AnalysisError("Event indicators must be 0 (censored) or 1 (event).")
    event = event.astype(bool)
    if not event.any():
        raise AnalysisError("There are no events, so no survival model can be fitted.")
    if entry is not None:
        entry = np.asarray(entry, dtype=np.float64).reshape(-1)
        late = ~(entry < time) | (entry < 0)
        if late.any():
            raise AnalysisError(
                f"Entry times must lie at or after 0 and before the exit time; {int(late.sum())} "
                f"row(s) do not (entry times {preview_values(entry[late])})."
            )
    return time, event, entry


def _param_table(names, theta, se, z) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "parameter": names,
            "estimate": theta,
            "std_error": se,
            "lower": theta - z * se,
            "upper": theta + z * se,
        }
    )


def fit_distribution(
    time,
    event,
    distribution: str,
    *,
    entry=None,
    group: str | None = None,
    confidence_level: float = 0.95,
) -> ParametricFit:
    """Fit one family by maximum likelihood to right-censored (optionally left-truncated) times."""
    if distribution not in DISTRIBUTIONS:
        raise AnalysisError(f"Unknown distribution {distribution!r}; choose from {DISTRIBUTIONS}.")
    time, event, entry = _check_times(time, event, entry)
    z = float(norm.ppf(0.5 + confidence_level / 2))
    d = int(event.sum())
    scale = fitting_scale(time)
    if distribution == "exponential":
        exposure = float((time / scale).sum() - (0.0 if entry is None else (entry / scale).sum()))
        log_rate = np.log(d / exposure) - np.log(scale)
        theta, cov = np.array([log_rate]), np.array([[1.0 / d]])
        log_lik = d * log_rate - d  # d log(rate) - rate * exposure, with rate * exposure = d
        params = _param_table(["log rate"], theta, standard_errors(np.diag(cov)), z)
        rate = params.iloc[0][["estimate", "lower", "upper"]].map(np.exp).to_numpy(dtype=float)
        params = pd.concat(
            [
                params,
                pd.DataFrame(
                    [
                        {
                            "parameter": "rate",
                            "estimate": rate[0],
                            "std_error": np.nan,
                            "lower": rate[1],
                            "upper": rate[2],
                        }
                    ]
                ),
            ],
            ignore_index=True,
        )
    else:
        if np.unique(time).shape[0] < 2:
            # with a single distinct time the likelihood grows without bound as the shape
            # concentrates the distribution there: no maximum exists
            raise FamilyNotEstimable(
                f"the {LABELS[distribution]} model needs at least two distinct times; every one "
                f"of the {time.shape[0]:,} row(s) has time {preview_values(time[:1])}"
            )
        fitter = _UNIVARIATE[distribution]()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fitter.fit(
                time / scale,
                event,
                entry=None if entry is None else entry / scale,
                timeline=[float(time.max() / scale)],
            )
        theta, cov = theta_in_time_unit(
            distribution,
            fitter.params_.to_numpy(dtype=float),
            fitter.variance_matrix_.to_numpy(dtype=float),
            scale,
        )
        # each event's density is divided by the scale; survival terms are unchanged
        log_lik = float(fitter.log_likelihood_) - d * float(np.log(scale))
        names = [PARAMETER_WORDS.get(name, name) for name in fitter.params_.index]
        params = _param_table(names, theta, standard_errors(np.diag(cov)), z)
    return ParametricFit(
        distribution=distribution,
        group=group,
        n=int(time.shape[0]),
        n_events=d,
        max_time=float(time.max()),
        theta=tuple(float(v) for v in theta),
        covariance=tuple(tuple(float(v) for v in row) for row in cov),
        parameters=params,
        log_likelihood=float(log_lik),
        aic=float(-2 * log_lik + 2 * theta.shape[0]),
        confidence_level=float(confidence_level),
    )


def compare_distributions(
    time,
    event,
    *,
    entry=None,
    group=None,
    distributions: tuple[str, ...] = DISTRIBUTIONS,
    times=(),
    horizon: float | None = None,
    grid_points: int = 200,
    confidence_level: float = 0.95,
) -> ParametricComparison:
    """Fit several families (per group level when ``group`` is given) and compare them.

    ``horizon`` sets the end of the curve grid (default: the last observed time); a horizon past
    the follow-up gives extrapolated rows, marked in ``curves.extrapolated``. ``times`` are the
    chosen times for survival estimates (beside the median).
    """
    time = np.asarray(time, dtype=np.float64).reshape(-1)
    event = np.asarray(event).reshape(-1)
    if time.shape[0] == 0:
        raise NoRowsError()
    if group is None:
        parts = [(None, np.ones(time.shape[0], dtype=bool))]
    else:
        cat = pd.Series(group).astype("category")
        if len(cat) != time.shape[0]:
            raise AnalysisError(
                f"There are {len(cat)} group values for {time.shape[0]} times; give one per row."
            )
        parts = [(str(lv), (cat == lv).to_numpy()) for lv in cat.cat.categories]
        parts = [(lv, m) for lv, m in parts if m.any()]
    end = float(np.nanmax(time)) if horizon is None else float(horizon)
    if not end > 0:
        raise AnalysisError(f"The curve horizon must be a positive time; got {horizon!r}.")
    grid = np.linspace(0.0, end, grid_points)
    chosen = np.asarray(times, dtype=float).reshape(-1)
    fits, failed = [], []
    for label, mask in parts:
        sub_entry = None if entry is None else np.asarray(entry, dtype=float)[mask]
        for dist in distributions:
            try:
                fits.append(
                    fit_distribution(
                        time[mask],
                        event[mask],
                        dist,
                        entry=sub_entry,
                        group=label,
                        confidence_level=confidence_level,
                    )
                )
            except ConvergenceError as exc:
                failed.append((dist, label, f"the fit did not converge: {exc}"[:300]))
            except FamilyNotEstimable as exc:
                failed.append((dist, label, str(exc)))
    if not fits:
        raise AnalysisError(
            "No parametric model could be fitted: " + "; ".join(r for _, _, r in failed)
        )
    aic = pd.DataFrame(
        [
            {
                "group": f.group,
                "distribution": f.distribution,
                "n_parameters": len(f.theta),
                "log_likelihood": f.log_likelihood,
                "aic": f.aic,
            }
            for f in fits
        ]
    )
    aic["delta_aic"] = aic["aic"] - aic.groupby("group", dropna=False)["aic"].transform("min")
    aic = aic.sort_values(["group", "aic"], kind="stable", na_position="first")
    estimates = []
    for f in fits:
        median = f.quantile(0.5)
        estimates.append(
            {
                "distribution": f.distribution,
                "group": f.group,
                "quantity": "median",
                "time": np.nan,  # the median is itself a time: see estimate / lower / upper
                "estimate": median["time"],
                "lower": median["lower"],
                "upper": median["upper"],
                "extrapolated": median["extrapolated"],
            }
        )
        if chosen.size:
            at = f.survival(chosen)
            for row in at.itertuples(index=False):
                estimates.append(
                    {
                        "distribution": f.distribution,
                        "group": f.group,
                        "quantity": "survival",
                        "time": row.time,
                        "estimate": row.survival,
                        "lower": row.lower,
                        "upper": row.upper,
                        "extrapolated": bool(row.extrapolated),
                    }
                )
    est = pd.DataFrame(estimates)
    return ParametricComparison(
        fits=tuple(fits),
        failed=tuple(failed),
        aic_table=aic.reset_index(drop=True),
        curves=pd.concat([f.survival(grid) for f in fits], ignore_index=True),
        estimates=est,
    )


def fit_parametric(
    frame: pd.DataFrame,
    *,
    by_group: bool = False,
    distributions: tuple[str, ...] = DISTRIBUTIONS,
    times=(),
    horizon: float | None = None,
    grid_points: int = 200,
    confidence_level: float = 0.95,
) -> ParametricComparison:
    """compare_distributions on a prepared frame (``_time``, ``_event``, optional ``_entry``).

    With ``by_group`` each level of ``_group`` gets its own fits (rows with a missing group are
    then left out), ready to overlay on that group's Kaplan–Meier curve. Rows at time 0 are left
    out (none of the families has a density there) and counted in ``rows_time_zero``.
    """
    if frame.empty:
        raise NoRowsError()
    at_zero = frame["_time"].to_numpy(dtype=float) <= 0
    if at_zero.all():
        raise AnalysisError(
            f"Parametric models need times > 0, and all {len(frame):,} row(s) are at time 0 "
            "(none of the families has a density there). Check the time column and its unit."
        )
    if at_zero.any():  # no family here has a density at 0: left out and counted
        frame = frame.loc[~at_zero]
    group = None
    if by_group and "_group" in frame.columns:
        missing = frame["_group"].isna().to_numpy()
        if missing.all():
            raise every_group_missing(
                "Fitting parametric models",
                "Fit them without groups or choose another group column.",
            )
        frame = frame.loc[~missing]
        group = frame["_group"]
    with np.errstate(all="ignore"):  # extreme times overflow inside a failing fit, reported
        result = compare_distributions(
            frame["_time"].to_numpy(dtype=float),
            frame["_event"].to_numpy(),
            entry=frame["_entry"].to_numpy(dtype=float) if "_entry" in frame.columns else None,
            group=group,
            distributions=distributions,
            times=times,
            horizon=horizon,
            grid_points=grid_points,
            confidence_level=confidence_level,
        )
    return replace(result, rows_time_zero=int(at_zero.sum()))
