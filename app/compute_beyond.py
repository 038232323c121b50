"""Cached engine calls for the pages beyond the basics (competing risks, parametric models,
landmark analysis). Keyed like ``app.compute``: the data's fingerprint, the roles, the settings.
Nothing here computes a statistic; it calls the engine and reshapes its results for drawing.
"""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import compute, thinning
from app.batch import curve_rows, incidence_rows, thinned_incidence
from engine.io.tables import ImportedTable


def _frame(fingerprint: str, roles_text: str, table: ImportedTable) -> pd.DataFrame:
    return compute._frame(fingerprint, roles_text, table)


@st.cache_resource(max_entries=8, show_spinner="Estimating the cumulative incidence…")
def incidence(
    fingerprint: str, roles_text: str, by_group: bool, confidence: float, _table: ImportedTable
):
    from engine.competing.incidence import cumulative_incidence

    frame = _frame(fingerprint, roles_text, _table)
    return cumulative_incidence(frame, by_group=by_group, confidence_level=confidence)


@st.cache_data(max_entries=16, show_spinner=False)
def incidence_drawing(
    fingerprint: str,
    roles_text: str,
    by_group: bool,
    confidence: float,
    height_px: int,
    _table: ImportedTable,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Thinned Aalen–Johansen vertices, and thinned 1 − KM vertices for the comparison."""
    rows = incidence_rows(incidence(fingerprint, roles_text, by_group, confidence, _table))
    _, cif, km = thinned_incidence(rows, height_px)
    return cif, km.assign(lower=km["estimate"], upper=km["estimate"], at_risk=0)


@st.cache_resource(max_entries=4, show_spinner="Fitting a Cox model per cause…")
def cause_specific(fingerprint: str, roles_text: str, ties: str, _table: ImportedTable, _roles):
    from engine.analysis.run import categorical_covariates
    from engine.competing.incidence import cause_specific_cox

    frame = _frame(fingerprint, roles_text, _table)
    return cause_specific_cox(
        frame,
        list(_roles.covariates),
        categorical=categorical_covariates(frame, _roles.covariates),
        reference=dict(_roles.reference),
        ties=ties,
    )


@st.cache_resource(max_entries=8, show_spinner="Fitting the parametric models…")
def parametric(
    fingerprint: str,
    roles_text: str,
    distributions: tuple[str, ...],
    by_group: bool,
    times: tuple[float, ...],
    horizon: float | None,
    confidence: float,
    _table: ImportedTable,
):
    from engine.parametric.fits import fit_parametric

    frame = _frame(fingerprint, roles_text, _table)
    return fit_parametric(
        frame,
        by_group=by_group,
        distributions=distributions,
        times=times,
        horizon=horizon,
        confidence_level=confidence,
    )


@st.cache_resource(max_entries=8, show_spinner="Fitting the AFT model…")
def aft(
    fingerprint: str,
    roles_text: str,
    distribution: str,
    confidence: float,
    _table: ImportedTable,
    _covariates: tuple[str, ...],
):
    from engine.parametric.aft import fit_aft

    frame = _frame(fingerprint, roles_text, _table)
    return fit_aft(frame, list(_covariates), distribution, confidence_level=confidence)


@st.cache_resource(max_entries=8, show_spinner="Selecting the subjects at risk…")
def landmark(fingerprint: str, roles_text: str, at: float, _table: ImportedTable):
    from engine.survival.landmark import landmark as select

    return select(_frame(fingerprint, roles_text, _table), at)


@st.cache_data(max_entries=8, show_spinner=False)
def landmark_curves(
    fingerprint: str, roles_text: str, at: float, height_px: int, _table: ImportedTable
) -> pd.DataFrame:
    """Thinned Kaplan–Meier vertices of the subjects kept at the landmark (time from it)."""
    from engine.survival.curves import curves_by_group

    frame = landmark(fingerprint, roles_text, at, _table).frame
    curves = curves_by_group(frame).curves
    drawn = curves[1:] if len(curves) > 1 else curves[:1]
    rows = pd.concat([curve_rows(c) for c in drawn], ignore_index=True)
    return thinning.thin_step_frame(
        rows, ["estimate", "lower", "upper"], (0.0, 1.0), height_px, group="group"
    )


@st.cache_data(max_entries=8, show_spinner="Testing…")
def landmark_comparison(
    fingerprint: str,
    roles_text: str,
    at: float,
    test: str,
    rho: float,
    gamma: float,
    _table: ImportedTable,
):
    """The group comparison among the subjects kept at the landmark (ρ and γ weigh the
    Fleming–Harrington test)."""
    from engine.survival.compare import compare_frame

    frame = landmark(fingerprint, roles_text, at, _table).frame
    if "_group" not in frame.columns or frame["_group"].nunique(dropna=True) < 2:
        return None
    return compare_frame(frame, test=test, rho=rho, gamma=gamma)


@st.cache_resource(max_entries=8, show_spinner="Building the baseline table…")
def baseline(fingerprint: str, roles_text: str, settings_text: str, _table: ImportedTable):
    """The baseline table (``engine.analysis.baseline.BaselineTable``) of the prepared rows,
    describing the
    columns as read; ``settings_text`` is the JSON of the page's baseline settings."""
    import json

    from app import data
    from engine.analysis.extra import baseline_table_from_settings
    from engine.prepare.roles import Roles

    prepared = data.prepared(_table, Roles.from_dict(json.loads(roles_text)))
    return baseline_table_from_settings(prepared, json.loads(settings_text), _table.frame)


# --- Gray's test, Fine–Gray model, prediction performance -------------------------------------


@st.cache_data(max_entries=8, show_spinner="Testing each cause…")
def gray_tests(fingerprint: str, roles_text: str, _table: ImportedTable) -> pd.DataFrame | None:
    """Gray's test per cause (None without two groups)."""
    from engine.competing.gray_test import gray_tests as tests

    frame = _frame(fingerprint, roles_text, _table)
    if "_group" not in frame.columns or frame["_group"].nunique(dropna=True) < 2:
        return None
    return pd.DataFrame([t.to_dict() for t in tests(frame)])


@st.cache_resource(max_entries=4, show_spinner="Fitting the Fine–Gray model…")
def fine_gray(fingerprint: str, roles_text: str, cause: str, ties: str, _table, _roles):
    from engine.analysis.run import categorical_covariates
    from engine.competing.fine_gray import fit_fine_gray

    frame = _frame(fingerprint, roles_text, _table)
    return fit_fine_gray(
        frame,
        list(_roles.covariates),
        cause,
        categorical=categorical_covariates(frame, _roles.covariates),
        reference=dict(_roles.reference),
        ties=ties,
    )


@st.cache_data(max_entries=8, show_spinner="Predicting the cumulative incidence…")
def fine_gray_profiles(
    fingerprint: str, roles_text: str, cause: str, ties: str, variable: str, _table, _roles
) -> pd.DataFrame:
    """Predicted cumulative incidence of the cause for each level (or quartile) of a covariate,
    the others at their mean or reference level."""
    from engine.cox.summaries import level_profiles

    result = fine_gray(fingerprint, roles_text, cause, ties, _table, _roles)
    return result.predict_incidence(level_profiles(result, variable))


@st.cache_data(max_entries=8, show_spinner=False)
def fine_gray_drawing(
    fingerprint: str,
    roles_text: str,
    cause: str,
    ties: str,
    variable: str,
    height_px: int,
    _table,
    _roles,
) -> pd.DataFrame:
    """Thinned vertices of the predicted-incidence curves (group = profile)."""
    curves = fine_gray_profiles(fingerprint, roles_text, cause, ties, variable, _table, _roles)
    rows = pd.DataFrame(
        {
            "group": curves["profile"],
            "time": curves["time"],
            "estimate": curves["cumulative_incidence"],
        }
    )
    return thinning.thin_step_frame(rows, ["estimate"], (0.0, 1.0), height_px, group="group")


@st.cache_resource(max_entries=4, show_spinner="Measuring how well the model predicts…")
def performance(model_key: tuple, times: tuple, tau, _table):
    """Every measure at the chosen times (calibration at the first; the page draws its own)."""
    from engine.prediction.performance import prediction_performance

    return prediction_performance(compute.cox_model(*model_key, _table), list(times), tau=tau)


@st.cache_resource(max_entries=4, show_spinner=False)
def predictions(model_key: tuple, _table):
    from engine.prediction.performance import cox_predictions

    return cox_predictions(compute.cox_model(*model_key, _table))


@st.cache_data(max_entries=16, show_spinner=False)
def calibration(model_key: tuple, at: float, groups: int, _table) -> pd.DataFrame:
    """Predicted against observed survival at ``at`` in ``groups`` risk groups."""
    from engine.prediction.performance import calibration_table

    return calibration_table(predictions(model_key, _table), at, groups=groups)
