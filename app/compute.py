"""Cached calls into the engine, keyed on the data's SHA-256, the roles and the settings.

Large results (curves with a vertex per distinct time) are kept as resources, not copied on each
use; what a page draws or shows (thinned vertices, small tables) is cached with
``st.cache_data``. A display switch therefore reruns in the time it takes to draw, not to
estimate. Nothing here computes a statistic: it calls the engine and reshapes its results.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from app import charts, data, thinning
from app.batch import HAZARD, INCIDENCE, SURVIVAL, censoring_marks, curve_rows
from engine.io.tables import ImportedTable
from engine.survival.curves import CurveSet, curves_by_group, nelson_aalen
from engine.survival.risk_table import without_missing
from engine.survival.summary import group_summary, numbers_at_risk_frame


def _frame(fingerprint: str, roles_text: str, table: ImportedTable) -> pd.DataFrame:
    return data.prepared_by_key(fingerprint, roles_text, table).frame


def label_text(label: object) -> str:
    return charts.ALL_ROWS_LABEL if label is None else str(label)


@st.cache_resource(max_entries=8, show_spinner="Estimating the curves…")
def curve_set(
    fingerprint: str, roles_text: str, confidence: float, transform: str, _table: ImportedTable
) -> CurveSet:
    frame = _frame(fingerprint, roles_text, _table)
    return curves_by_group(frame, confidence=confidence, transform=transform)


@st.cache_resource(max_entries=8, show_spinner="Estimating the cumulative hazard…")
def hazard_curves(
    fingerprint: str, roles_text: str, confidence: float, _table: ImportedTable
) -> list:
    """Nelson–Aalen for all rows, then per group (rows split by group, engine per part)."""
    frame = _frame(fingerprint, roles_text, _table)
    entry = "_entry" in frame.columns

    def one(part: pd.DataFrame, label):
        return nelson_aalen(
            part["_time"].to_numpy(),
            part["_event"].to_numpy(),
            entry=part["_entry"].to_numpy() if entry else None,
            confidence=confidence,
            label=label,
        )

    out = [one(frame, None)]
    if "_group" in frame.columns:
        for label, part in frame.groupby("_group", observed=True, sort=True):
            out.append(one(part, label))
    return out


def _selected(curves: list, by_group: bool) -> list:
    return curves[1:] if by_group and len(curves) > 1 else curves[:1]


@st.cache_data(max_entries=32, show_spinner=False)
def curve_drawing(
    fingerprint: str,
    roles_text: str,
    scale: str,
    confidence: float,
    transform: str,
    by_group: bool,
    size_px: tuple[int, int],
    x_max: float | None,
    _table: ImportedTable,
) -> dict:
    """Thinned vertices and censoring marks to draw, and the axis ranges they need."""
    if scale == HAZARD:
        curves = hazard_curves(fingerprint, roles_text, confidence, _table)
        censor_source = curve_set(fingerprint, roles_text, confidence, transform, _table).curves
    else:
        curves = curve_set(fingerprint, roles_text, confidence, transform, _table).curves
        censor_source = curves
    return drawing_from_curves(curves, censor_source, scale, by_group, size_px, x_max)


def drawing_from_curves(
    curves, censor_source, scale: str, by_group: bool, size_px: tuple[int, int], x_max
) -> dict:
    """``curve_drawing`` for curves already estimated (in memory or from aggregated counts)."""
    curves = _selected(list(curves), by_group)
    censor_source = _selected(list(censor_source), by_group)
    rows = pd.concat([curve_rows(c, scale) for c in curves], ignore_index=True)
    last_time = float(rows["time"].max()) if len(rows) else 1.0
    x_upper = float(x_max) if x_max else last_time
    if scale == HAZARD:
        # The axis follows the estimates; a band that widens late (few at risk) is clipped at
        # half as much again rather than flattening every curve.
        shown = rows.loc[rows["time"] <= x_upper]
        estimate = shown["estimate"].to_numpy(float)
        upper = shown["upper"].to_numpy(float)
        top = float(np.nanmax(estimate)) if estimate.size else 0.0
        band_top = float(np.nanmax(upper[np.isfinite(upper)])) if np.isfinite(upper).any() else 0.0
        top = max(top * 1.05, min(band_top, top * 1.5))
        y_domain = (0.0, top if top > 0 else 1.0)
    else:
        y_domain = (0.0, 1.0)
    width, height = size_px
    thinned = thinning.thin_step_frame(
        rows, ["estimate", "lower", "upper"], y_domain, height, group="group"
    )
    censored = censoring_marks(
        censor_source, curves, scale, (0.0, x_upper), y_domain, (width, height)
    )
    return {
        "curves": thinned,
        "censored": censored,
        "y_domain": y_domain,
        "x_upper": x_upper,
        "last_time": last_time,
        "vertices": len(rows),
    }


def full_curve_table(
    fingerprint: str,
    roles_text: str,
    scale: str,
    confidence: float,
    transform: str,
    table: ImportedTable,
) -> pd.DataFrame:
    """Every vertex with its exact values (for the CSV download), as the engine returns it."""
    if scale == HAZARD:
        curves = hazard_curves(fingerprint, roles_text, confidence, table)
        return pd.concat([c.to_frame() for c in curves], ignore_index=True)
    curves = curve_set(fingerprint, roles_text, confidence, transform, table).curves
    if scale == INCIDENCE:
        return pd.concat([c.incidence_frame() for c in curves], ignore_index=True)
    return pd.concat([c.to_frame() for c in curves], ignore_index=True)


@st.cache_data(max_entries=32, show_spinner=False)
def at_risk_table(
    fingerprint: str,
    roles_text: str,
    ticks: tuple[float, ...],
    by_group: bool,
    _table: ImportedTable,
) -> pd.DataFrame:
    frame = _frame(fingerprint, roles_text, _table)
    result = numbers_at_risk_frame(frame, ticks, by_group=by_group).to_frame()
    result["group"] = result["group"].map(label_text)
    return result


@st.cache_data(max_entries=32, show_spinner="Summarising…")
def summary_table(
    fingerprint: str,
    roles_text: str,
    times: tuple[float, ...],
    tau: float | None,
    confidence: float,
    transform: str,
    _table: ImportedTable,
    rmst_origin: str = "zero",
):
    frame = _frame(fingerprint, roles_text, _table)
    return group_summary(
        frame, times, tau=tau, confidence=confidence, transform=transform, rmst_origin=rmst_origin
    )


# --- group comparison -----------------------------------------------------------------------


def comparison_frame(
    fingerprint: str,
    roles_text: str,
    grouping: tuple,
    strata_column: str | None,
    table: ImportedTable,
) -> pd.DataFrame:
    """The prepared frame with ``_group`` set for the comparison and ``_strata`` if asked
    (``engine.analysis.run.comparison_frame``, the one the recipe replay uses).

    ``grouping`` is ("role",) for the group role, or ("cut", column, k) for a numeric column cut
    at its quantiles into k groups of about equal size
    (``engine.prepare.columns.cut_at_quantiles``).
    """
    from engine.analysis.run import comparison_frame as engine_comparison_frame

    prepared = data.prepared_by_key(fingerprint, roles_text, table)
    cut = {"column": grouping[1], "groups": int(grouping[2])} if grouping[0] == "cut" else None
    return engine_comparison_frame(
        prepared, cut=cut, strata=strata_column or False, source=table.frame
    )


def _complete(frame: pd.DataFrame) -> pd.DataFrame:
    """Rows with a group (and stratum): the engine's own rule for comparisons."""
    return without_missing(frame)[0]


@st.cache_data(max_entries=32, show_spinner="Testing…")
def comparison(
    fingerprint: str,
    roles_text: str,
    grouping: tuple,
    strata_column: str | None,
    test: str,
    rho: float,
    gamma: float,
    _table: ImportedTable,
):
    from engine.survival.compare import compare_frame

    frame = comparison_frame(fingerprint, roles_text, grouping, strata_column, _table)
    return compare_frame(frame, test=test, rho=rho, gamma=gamma)


@st.cache_data(max_entries=32, show_spinner=False)
def trend(
    fingerprint: str,
    roles_text: str,
    grouping: tuple,
    strata_column: str | None,
    test: str,
    rho: float,
    gamma: float,
    order: tuple | None,
    scores: tuple | None,
    _table: ImportedTable,
):
    from engine.survival.compare import trend_frame

    frame = comparison_frame(fingerprint, roles_text, grouping, strata_column, _table)
    labels = list(frame["_group"].cat.categories)
    return trend_frame(
        frame,
        order=[labels[[str(x) for x in labels].index(o)] for o in order] if order else None,
        scores=scores,
        test=test,
        rho=rho,
        gamma=gamma,
    )


@st.cache_data(max_entries=32, show_spinner=False)
def pairwise(
    fingerprint: str,
    roles_text: str,
    grouping: tuple,
    strata_column: str | None,
    test: str,
    rho: float,
    gamma: float,
    _table: ImportedTable,
):
    from engine.survival.compare import pairwise_frame

    frame = comparison_frame(fingerprint, roles_text, grouping, strata_column, _table)
    return pairwise_frame(frame, test=test, rho=rho, gamma=gamma)


@st.cache_data(max_entries=32, show_spinner=False)
def rmst_pair(
    fingerprint: str,
    roles_text: str,
    grouping: tuple,
    pair: tuple[str, str],
    tau: float | None,
    confidence: float,
    _table: ImportedTable,
    origin: str = "zero",
):
    """RMST of two groups and their difference (the second minus the first), from ``origin``
    ("zero" or "first_entry")."""
    from engine.survival.rmst import rmst_by_group

    frame = _complete(comparison_frame(fingerprint, roles_text, grouping, None, _table))
    labels = {str(x): x for x in frame["_group"].cat.categories}
    chosen = [labels[p] for p in pair]
    part = frame.loc[frame["_group"].isin(chosen)]
    group = pd.Categorical(part["_group"].astype(object), categories=chosen)
    return rmst_by_group(
        part["_time"].to_numpy(),
        part["_event"].to_numpy(),
        pd.Series(group, index=part.index),
        tau=tau,
        confidence=confidence,
        entry=part["_entry"].to_numpy() if "_entry" in part.columns else None,
        origin=origin,
    )


@st.cache_data(max_entries=16, show_spinner=False)
def comparison_drawing(
    fingerprint: str,
    roles_text: str,
    grouping: tuple,
    size_px: tuple[int, int],
    _table: ImportedTable,
) -> pd.DataFrame:
    """Thinned Kaplan–Meier vertices of the compared groups (for the small figure)."""
    frame = _complete(comparison_frame(fingerprint, roles_text, grouping, None, _table))
    curves = curves_by_group(frame).curves[1:]
    rows = pd.concat([curve_rows(c, SURVIVAL) for c in curves], ignore_index=True)
    return thinning.thin_step_frame(
        rows, ["estimate", "lower", "upper"], (0.0, 1.0), size_px[1], group="group"
    )


@st.cache_data(max_entries=32, show_spinner=False)
def group_levels(
    fingerprint: str, roles_text: str, grouping: tuple, _table: ImportedTable
) -> list[str]:
    """Labels of the compared groups, in their display order."""
    frame = comparison_frame(fingerprint, roles_text, grouping, None, _table)
    return [str(x) for x in frame["_group"].cat.categories]


# --- Cox regression -------------------------------------------------------------------------


@st.cache_resource(max_entries=8, show_spinner="Fitting the Cox model…")
def cox_model(
    fingerprint: str,
    roles_text: str,
    covariates: tuple[str, ...],
    reference: tuple[tuple[str, str], ...],
    strata_column: str | None,
    ties: str,
    variance: str,
    _table: ImportedTable,
):
    """The model builder's Cox model (``engine.analysis.run.fit_cox_from_roles``, as the recipe
    replay fits it); the roles have no strata here (``data.model_roles``), so the page's
    strata column is the only one. ``variance``: "auto", "model" or "robust"."""
    from engine.analysis.run import fit_cox_from_roles

    return fit_cox_from_roles(
        data.prepared_by_key(fingerprint, roles_text, _table),
        ties=ties,
        confidence=0.95,
        covariates=covariates,
        reference=reference,
        strata=strata_column or False,
        source=_table.frame,
        variance=variance,
    )


# Residuals have one row per event (Schoenfeld) or per row (martingale): kept as resources, not
# copied on every rerun.
@st.cache_resource(max_entries=8, show_spinner="Checking proportional hazards…")
def ph_check(model_key: tuple, time_scale: str, _table: ImportedTable) -> tuple:
    """The PH test and the scaled Schoenfeld residuals (for the plots)."""
    from engine.cox.diagnostics import proportional_hazards_test, schoenfeld_residuals

    result = cox_model(*model_key, _table)
    residuals = schoenfeld_residuals(result, time_scale)
    test = proportional_hazards_test(result, time_scale, residuals=residuals)
    return test, residuals.to_frame()


@st.cache_data(max_entries=8, show_spinner="Screening each covariate alone…")
def univariable(model_key: tuple, _table: ImportedTable) -> pd.DataFrame:
    from engine.cox.summaries import univariable_screen

    return univariable_screen(cox_model(*model_key, _table)).to_frame()


@st.cache_data(max_entries=8, show_spinner=False)
def forest(model_key: tuple, _table: ImportedTable) -> pd.DataFrame:
    from engine.cox.summaries import forest_data

    return forest_data(cox_model(*model_key, _table)).to_frame()


@st.cache_resource(max_entries=8, show_spinner="Computing residuals…")
def martingale(model_key: tuple, _table: ImportedTable) -> tuple[pd.DataFrame, pd.DataFrame]:
    from engine.cox.diagnostics import martingale_residuals

    result = martingale_residuals(cox_model(*model_key, _table))
    return result.table, result.bins


@st.cache_data(max_entries=8, show_spinner=False)
def log_minus_log_lines(
    fingerprint: str, roles_text: str, variable: str, _table: ImportedTable
) -> pd.DataFrame:
    from engine.cox.diagnostics import log_minus_log

    return log_minus_log(_frame(fingerprint, roles_text, _table), variable).to_frame()


@st.cache_data(max_entries=8, show_spinner="Predicting curves…")
def predicted(model_key: tuple, variable: str, _table: ImportedTable) -> tuple:
    from engine.cox.summaries import level_profiles, predict_survival

    result = cox_model(*model_key, _table)
    prediction = predict_survival(result, level_profiles(result, variable))
    return prediction.to_frame(), prediction.profiles


@st.cache_data(max_entries=8, show_spinner="Predicting curves…")
def predicted_profiles(model_key: tuple, profiles: tuple, _table: ImportedTable) -> tuple:
    """Predicted curves for profiles given as (name, ((covariate, value), ...)) pairs."""
    from engine.cox.summaries import predict_survival

    result = cox_model(*model_key, _table)
    named = {name: dict(values) for name, values in profiles}
    prediction = predict_survival(result, named)
    return prediction.to_frame(), prediction.profiles


def sample_rows(frame: pd.DataFrame, limit: int, seed: int = 20261202) -> pd.DataFrame:
    """At most ``limit`` rows to draw as dots (seeded, so the picture does not change)."""
    if len(frame) <= limit:
        return frame
    return frame.sample(n=limit, random_state=seed).sort_index()
