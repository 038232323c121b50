"""Restricted cubic splines for continuous covariates of the Cox model.

A restricted (natural) cubic spline with k knots t_1 < ... < t_k is cubic between the knots and
linear beyond the outer ones. In the truncated-power form of Harrell (2015, *Regression Modeling
Strategies*, 2nd ed., §2.4.5) it has k - 1 columns: x itself and, for j = 1..k-2,

    [(x - t_j)+^3 - (x - t_{k-1})+^3 (t_k - t_j)/(t_k - t_{k-1})
                  + (x - t_k)+^3 (t_{k-1} - t_j)/(t_k - t_{k-1})] / (t_k - t_1)^2,

the division keeping the columns on the scale of x. Any basis of the same space (for example the
natural cubic regression splines of patsy's ``cr``) gives the same fit and the same curve.

Knots sit at standard quantiles of the variable (Harrell 2015, §2.4.6, Table 2.3 — the
percentages below are from memory), with the outer ones moved to the 5th smallest and largest
values when there are fewer than 100 rows. The likelihood-ratio test of the k - 2 non-linear
columns is the test for non-linearity; the figure shows exp((B(x) - B(x_ref)) beta), the hazard
ratio against a reference value (the median unless chosen), with a pointwise band from the
coefficients' covariance (robust when the model's is).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from engine.cox.fit import ChiSquareTest, CoxResult, chi_square, fit_cox
from engine.cox.likelihood import newton_raphson
from engine.errors import AnalysisError, SettingError, preview_values
from engine.json_values import json_float

KNOT_QUANTILES = {
    3: (0.10, 0.50, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.50, 0.725, 0.95),
    6: (0.05, 0.23, 0.41, 0.59, 0.77, 0.95),
    7: (0.025, 0.1833, 0.3417, 0.50, 0.6583, 0.8167, 0.975),
}  # Harrell (2015) Table 2.3, from memory
DEFAULT_KNOTS = 4
CURVE_POINTS = 101
CURVE_RANGE = (0.01, 0.99)  # the figure spans the 1st to the 99th percentile


def knot_positions(values, knots: int = DEFAULT_KNOTS, name: str = "x") -> np.ndarray:
    """Knots at Harrell's standard quantiles of ``values`` (finite numbers)."""
    if knots not in KNOT_QUANTILES:
        raise SettingError(
            f"A spline for '{name}' needs 3 to 7 knots, got {knots!r}; 4 is a common choice."
        )
    x = np.sort(np.asarray(values, dtype=float))
    points = np.quantile(x, KNOT_QUANTILES[knots])
    if len(x) < 100 and len(x) >= 10:
        points[0], points[-1] = x[4], x[-5]
    if len(np.unique(points)) < knots:
        raise AnalysisError(
            f"'{name}' has too few distinct values for {knots} spline knots (knots at "
            f"{preview_values(points.round(6).tolist(), 7)} coincide); use fewer knots or model "
            "it as it is."
        )
    return points


def spline_basis(values, knots: Sequence[float]) -> np.ndarray:
    """The k - 1 columns of the restricted cubic spline (x first), as in the module docstring."""
    x = np.asarray(values, dtype=float)
    t = np.asarray(knots, dtype=float)
    k = len(t)
    norm = (t[-1] - t[0]) ** 2
    span = t[-1] - t[-2]

    def cube(knot):
        return np.clip(x - knot, 0, None) ** 3

    columns = [x]
    for j in range(k - 2):
        columns.append(
            (cube(t[j]) - cube(t[-2]) * (t[-1] - t[j]) / span + cube(t[-1]) * (t[-2] - t[j]) / span)
            / norm
        )
    return np.column_stack(columns)


def spline_column_names(variable: str, knots: int) -> list[str]:
    return [variable, *(f"{variable} (spline {j})" for j in range(1, knots - 1))]


@dataclass(frozen=True)
class SplineEffect:
    variable: str
    knots: tuple[float, ...]
    reference: float
    nonlinearity: ChiSquareTest  # LR test of the non-linear columns (df = knots - 2)
    association: ChiSquareTest  # LR test of every column of the spline (df = knots - 1)
    curve: pd.DataFrame  # x, hazard_ratio, lower, upper

    def to_frame(self) -> pd.DataFrame:
        return self.curve.assign(variable=self.variable)

    def to_dict(self) -> dict:
        def test(t):
            return {k: v for k, v in t.to_dict().items() if k != "variable"}

        return {
            "variable": self.variable,
            "knots": [float(t) for t in self.knots],
            "reference": float(self.reference),
            "nonlinearity": test(self.nonlinearity),
            "association": test(self.association),
            "curve": [
                {k: json_float(row[k]) for k in ("x", "hazard_ratio", "lower", "upper")}
                for row in self.curve.to_dict(orient="records")
            ],
        }


@dataclass(frozen=True)
class SplineModel:
    """The Cox model with the chosen covariates as splines, and one effect per spline."""

    result: CoxResult
    effects: tuple[SplineEffect, ...]

    def to_frame(self) -> pd.DataFrame:
        return pd.concat([e.to_frame() for e in self.effects], ignore_index=True)

    def to_dict(self) -> list[dict]:
        return [e.to_dict() for e in self.effects]


def fit_splines(
    frame: pd.DataFrame,
    covariates: Sequence[str],
    splines: Sequence[Mapping],
    *,
    categorical: Sequence[str] = (),
    **cox_options,
) -> SplineModel:
    """Fit the Cox model with each variable of ``splines`` ({"variable", "knots",
    "reference"}: knots 3–7, default 4; reference default the median) as a restricted cubic
    spline, the other covariates as they are, and test each spline's non-linearity."""
    chosen = _validated(frame, covariates, splines, categorical)
    used = _complete_rows(frame, covariates, cox_options)
    added, knots_of = {}, {}
    for variable, knots, _reference in chosen:
        values = frame[variable].to_numpy(dtype=float)
        points = knot_positions(values[used], knots, variable)
        knots_of[variable] = points
        basis = spline_basis(values, points)
        for name, column in zip(spline_column_names(variable, knots), basis.T, strict=True):
            added[name] = column
    names = {v: spline_column_names(v, k) for v, k, _ in chosen}
    model_covariates = [n for c in covariates for n in names.get(c, [c])]
    work = frame.assign(**{k: v for k, v in added.items() if k not in names})
    result = fit_cox(
        work, model_covariates, categorical=categorical, without_each=False, **cox_options
    )
    effects = tuple(
        _effect(result, variable, knots_of[variable], reference, names[variable], frame)
        for variable, _knots, reference in chosen
    )
    return SplineModel(result, effects)


def _validated(frame, covariates, splines, categorical):
    chosen = []
    for spec in splines:
        variable = str(spec.get("variable", ""))
        if variable not in covariates:
            raise SettingError(
                f"A spline is asked for '{variable}', which is not a covariate of the model "
                f"({preview_values(list(covariates), 8)}); add it to the covariates first."
            )
        if variable in categorical or not pd.api.types.is_numeric_dtype(frame[variable]):
            raise SettingError(
                f"A spline needs a numeric covariate; '{variable}' is categorical. Choose a "
                "continuous covariate."
            )
        knots = spec.get("knots") or DEFAULT_KNOTS
        if isinstance(knots, bool) or not isinstance(knots, int | np.integer):
            raise SettingError(
                f"The number of spline knots for '{variable}' must be a whole number from 3 to "
                f"7, got {knots!r}."
            )
        chosen.append((variable, int(knots), spec.get("reference")))
    if len({v for v, _, _ in chosen}) < len(chosen):
        raise SettingError("Each variable can have one spline; a variable is named twice.")
    return chosen


def _complete_rows(frame, covariates, cox_options) -> np.ndarray:
    """The rows the model will use (complete cases of its columns), for the knots."""
    columns = [*covariates, "_time", "_event"]
    columns += [cox_options[k] for k in ("strata", "entry", "clusters") if cox_options.get(k)]
    return frame[[c for c in columns if c in frame.columns]].notna().all(axis=1).to_numpy()


def _effect(result, variable, knots, reference, names, frame) -> SplineEffect:
    design = result.design
    labels = [t.label for t in design.terms]
    columns = np.array([labels.index(n) for n in names])
    values = frame[variable].to_numpy(dtype=float)[design.used]
    if reference is None:
        reference = float(np.median(values))
    elif not isinstance(reference, int | float) or not np.isfinite(reference):
        raise SettingError(
            f"The spline's reference value for '{variable}' must be a number, got {reference!r}."
        )
    low, high = np.quantile(values, CURVE_RANGE)
    grid = np.unique(np.concatenate([np.linspace(low, high, CURVE_POINTS), [reference]]))
    contrast = spline_basis(grid, knots) - spline_basis([reference], knots)
    beta = result.model.beta[columns]
    covariance = result.covariance[np.ix_(columns, columns)]
    log_hr = contrast @ beta
    se = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", contrast, covariance, contrast), 0))
    z = stats.norm.ppf(0.5 + result.confidence / 2)
    with np.errstate(over="ignore"):  # a bound past the float range is infinite: null in JSON
        curve = pd.DataFrame(
            {
                "x": grid,
                "hazard_ratio": np.exp(log_hr),
                "lower": np.exp(log_hr - z * se),
                "upper": np.exp(log_hr + z * se),
            }
        )
    nonlinear, everything = columns[1:], columns
    return SplineEffect(
        variable=variable,
        knots=tuple(float(k) for k in knots),
        reference=float(reference),
        nonlinearity=_lr_without(result, nonlinear, variable),
        association=_lr_without(result, everything, variable),
        curve=curve,
    )


def _lr_without(result: CoxResult, columns: np.ndarray, name: str) -> ChiSquareTest:
    """Likelihood-ratio test of ``columns`` = 0: refit without them on the same rows (warm
    started from the full model's other coefficients)."""
    model = result.model
    keep = np.setdiff1d(np.arange(model.scaled.shape[1]), columns)
    if len(keep) == 0:
        reduced = result.null_loglik
    else:
        start = (model.beta * model.scale)[keep]
        reduced = newton_raphson(model.layout, model.scaled[:, keep], result.ties, start=start)
        reduced = reduced.loglik
    return chi_square(name, 2 * (result.loglik - reduced), len(columns))
