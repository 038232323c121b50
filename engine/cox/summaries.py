"""What a fitted Cox model offers beyond its coefficient table: the univariable screen beside the
multivariable hazard ratios, forest-plot rows, and predicted survival for chosen profiles."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.cox.fit import CoxResult, chi_square, runaway_terms, term_estimates
from engine.cox.likelihood import baseline_hazard, newton_raphson
from engine.errors import AnalysisError, preview_values


def _to_dicts(frame: pd.DataFrame) -> list[dict]:
    clean = frame.astype(object).where(frame.notna(), None)
    return [
        {k: (float(v) if isinstance(v, np.floating) else v) for k, v in row.items()}
        for row in clean.to_dict(orient="records")
    ]


@dataclass(frozen=True)
class UnivariableScreen:
    """Each covariate alone (same rows as the full model) next to the multivariable estimate."""

    table: pd.DataFrame

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def to_dict(self) -> list[dict]:
        return _to_dicts(self.table)


def univariable_screen(result: CoxResult) -> UnivariableScreen:
    model, design = result.model, result.design
    multi = {(t.variable, t.level): t for t in result.terms}
    rows = []
    for variable in design.variables:
        cols = design.columns_of(variable)
        fit = newton_raphson(model.layout, model.scaled[:, cols], result.ties)
        scale = model.scale[cols]
        covariance = np.linalg.inv(fit.information) / np.outer(scale, scale)
        terms = [design.terms[j] for j in cols]
        estimates = (fit.beta / scale, covariance, result.confidence, None, runaway_terms(fit))
        alone = term_estimates(terms, *estimates)
        lr = chi_square(variable, 2 * (fit.loglik - fit.null_loglik), len(cols))
        for est in alone:
            both = multi[(est.variable, est.level)]
            rows.append(
                {
                    "variable": est.variable,
                    "level": est.level,
                    "reference": est.reference,
                    "univariable_hazard_ratio": est.hazard_ratio,
                    "univariable_lower": est.lower,
                    "univariable_upper": est.upper,
                    "univariable_p_value": est.p_value,
                    "univariable_lr_p_value": lr.p_value,
                    "multivariable_hazard_ratio": both.hazard_ratio,
                    "multivariable_lower": both.lower,
                    "multivariable_upper": both.upper,
                    "multivariable_p_value": both.p_value,
                }
            )
    return UnivariableScreen(pd.DataFrame(rows))


@dataclass(frozen=True)
class ForestData:
    """One row per term plus a reference row (hazard ratio 1) per categorical variable."""

    table: pd.DataFrame

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def to_dict(self) -> list[dict]:
        return _to_dicts(self.table)


def forest_data(result: CoxResult) -> ForestData:
    layout = result.model.layout
    event_by_row = np.empty(len(layout.event), dtype=bool)
    event_by_row[layout.order] = layout.event
    return forest_rows(result.design, result.terms, event_by_row, result.n, result.events)


def forest_rows(design, terms, event_by_row, n: int, events: int) -> ForestData:
    """Forest-plot rows of any model on a treatment-coded design (Cox, Fine–Gray): ``terms``
    hold the estimates, ``event_by_row`` says which design rows had the event."""
    rows = []
    for variable in design.variables:
        cols = design.columns_of(variable)
        estimates = [terms[j] for j in cols]
        if variable not in design.levels:
            rows.append(_forest_row(estimates[0], n, events, False))
            continue
        reference = design.levels[variable][0]
        in_reference = ~design.matrix[:, cols].astype(bool).any(axis=1)
        rows.append(
            {
                "variable": variable,
                "level": reference,
                "is_reference": True,
                "hazard_ratio": 1.0,
                "lower": None,
                "upper": None,
                "p_value": None,
                "n": int(in_reference.sum()),
                "events": int(event_by_row[in_reference].sum()),
            }
        )
        for j, est in zip(cols, estimates, strict=True):
            here = design.matrix[:, j] == 1
            rows.append(_forest_row(est, int(here.sum()), int(event_by_row[here].sum()), True))
    return ForestData(pd.DataFrame(rows))


def _forest_row(est, n, events, categorical):
    return {
        "variable": est.variable,
        "level": est.level if categorical else None,
        "is_reference": False,
        "hazard_ratio": est.hazard_ratio,
        "lower": est.lower,
        "upper": est.upper,
        "p_value": est.p_value,
        "n": n,
        "events": events,
    }


@dataclass(frozen=True)
class PredictedSurvival:
    """Survival curves S(t | profile) from the Breslow baseline (per stratum with strata)."""

    table: pd.DataFrame  # profile, stratum, time, survival
    profiles: pd.DataFrame  # one row per profile: the covariate values used

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def to_dict(self) -> dict:
        return {"curves": _to_dicts(self.table), "profiles": _to_dicts(self.profiles)}


def typical_profile(result: CoxResult) -> dict:
    """Numeric covariates at their mean over the rows used, categoricals at the reference."""
    design = result.design
    profile = {}
    for variable in design.variables:
        if variable in design.levels:
            profile[variable] = design.levels[variable][0]
        else:
            profile[variable] = float(design.center[design.columns_of(variable)[0]])
    return profile


def level_profiles(result: CoxResult, variable: str) -> dict[str, dict]:
    """Profiles varying one covariate (each level; a numeric's quartiles, or its values when it
    has five or fewer), the others typical."""
    design = result.design
    if variable not in design.variables:
        raise AnalysisError(
            f"'{variable}' is not a covariate of this model; choose one of "
            f"{preview_values(design.variables, 12)}."
        )
    base = typical_profile(result)
    if variable in design.levels:
        values = list(design.levels[variable])
        return {f"{variable} = {v}": {**base, variable: v} for v in values}
    column = design.matrix[:, design.columns_of(variable)[0]]
    distinct = np.unique(column)
    if len(distinct) <= 5:  # a coded variable (e.g. 0/1): its own values, not quartiles
        return {f"{variable} = {v:.4g}": {**base, variable: float(v)} for v in distinct}
    quartiles = np.quantile(column, [0.25, 0.5, 0.75])
    return {
        f"{variable} = {q:.4g} ({name})": {**base, variable: float(q)}
        for q, name in zip(quartiles, ("lower quartile", "median", "upper quartile"), strict=True)
    }


def _profile_vector(result: CoxResult, profile: Mapping) -> np.ndarray:
    design = result.design
    unknown = sorted(set(profile) - set(design.variables))
    if unknown:
        raise AnalysisError(
            f"Profile names {preview_values(unknown)}, which are not covariates of this model."
        )
    full = {**typical_profile(result), **profile}
    x = np.zeros(len(design.terms))
    for j, term in enumerate(design.terms):
        value = full[term.variable]
        if term.level is None:
            x[j] = float(value)
        else:
            levels = design.levels[term.variable]
            if str(value) not in levels:
                raise AnalysisError(
                    f"Profile value {value!r} for '{term.variable}' is not one of its levels "
                    f"{preview_values(levels, 12)}."
                )
            x[j] = float(str(value) == term.level)
    return x


def predict_survival(result: CoxResult, profiles: Mapping[str, Mapping]) -> PredictedSurvival:
    """``profiles`` maps a label to covariate values; covariates left out are set typical."""
    model = result.model
    layout = model.layout
    eta = model.scaled @ (model.beta * model.scale)  # centred linear predictor
    increments = baseline_hazard(layout, eta)
    strata_levels = model.strata_levels or (None,)
    frames, described = [], []
    for label, profile in profiles.items():
        x = _profile_vector(result, profile)
        risk = np.exp((x - model.center) @ model.beta)
        described.append({"profile": label, **{**typical_profile(result), **profile}})
        for code, stratum in enumerate(strata_levels):
            here = layout.group_stratum == code
            cumulative = np.cumsum(increments[here]) * risk
            frames.append(
                pd.DataFrame(
                    {
                        "profile": label,
                        "stratum": stratum,
                        "time": np.concatenate([[0.0], layout.group_time[here]]),
                        "survival": np.exp(-np.concatenate([[0.0], cumulative])),
                    }
                )
            )
    return PredictedSurvival(pd.concat(frames, ignore_index=True), pd.DataFrame(described))
