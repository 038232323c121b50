"""One analysis run from settings: the sections of the schema-1 JSON object.

The command line, the report and a replayed recipe all call `run_analysis`, so the numbers they
show come from one place. Settings use the layout a recipe stores:
``{"curves": {...}, "comparison": {...}, "cox": {...}}``; a missing section or key takes its
default, and the comparison and the Cox model run only when the roles ask for them (a group
column or a cut, covariates).

The comparison and the Cox model may depart from the roles as their pages allow: the comparison's
groups from a numeric column cut at its quantiles (``"cut": {"column", "groups"}``), a model on a
subset of the covariates with other reference levels, and either one stratified by another
column. A ``"strata"`` setting of ``None`` means the strata role (none if unset), ``False`` no
stratification, a column name that column. Those columns are read from ``source``, the frame
``prepare`` was given, for the prepared rows.
"""

from __future__ import annotations

from collections.abc import Mapping

import pandas as pd

from engine.checks import PreparedData
from engine.columns import cut_at_quantiles
from engine.compare import compare_frame
from engine.cox import cox_json, fit_cox
from engine.cox_diagnostics import proportional_hazards_test
from engine.errors import RoleError
from engine.summary import COMPARISON_KEYS, curves_json

ANALYSIS_DEFAULTS: dict[str, dict] = {
    "curves": {"times": [], "ci_transform": "log-log", "confidence": 0.95, "rmst_horizon": None},
    # cut: None (the group role) or {"column": numeric column, "groups": k};
    # strata: None (the strata role), False (none) or a column
    "comparison": {"test": "logrank", "rho": 0.0, "gamma": 0.0, "cut": None, "strata": None},
    # covariates: None (the roles' list) or a list; reference: None (the roles' reference
    # levels) or [column, level] pairs that replace them; strata as for the comparison.
    # confidence: the hazard-ratio intervals' level (the Regression page shows 95%)
    "cox": {
        "ties": "efron",
        "confidence": 0.95,
        "ph_transform": "km",
        "covariates": None,
        "strata": None,
        "reference": None,
    },
    # The analyses below run only when the settings name them (a recipe, --competing ...).
    # gray_test: Gray's test per cause across the groups; fine_gray: a cause name (or None)
    "competing": {
        "times": [],
        "by_group": True,
        "cause_specific_cox": True,
        "gray_test": True,
        "fine_gray": None,
    },
    "parametric": {
        "distributions": ["exponential", "weibull", "lognormal", "loglogistic"],
        "by_group": False,
        "times": [],
        "horizon": None,
        "aft_distribution": "weibull",
    },
    "sample_size": {
        "hazard_ratio": 0.7,
        "alpha": 0.05,
        "sides": 2,
        "power": 0.8,
        "allocation_ratio": 1.0,
        "event_probability": 1.0,
        "events": None,
    },
    "landmark": {"time": None, "test": "logrank"},
    # performance of the Cox model: AUC and Brier score at times, tau of Uno's C (None: the
    # largest time), calibration at a time (None: the first of times), bootstrap of optimism
    # (replicates 0: none)
    "performance": {
        "times": [],
        "tau": None,
        "calibration_time": None,
        "risk_groups": 5,
        "replicates": 100,
        "seed": 20261202,
    },
}
CORE_ANALYSES = ("curves", "comparison", "cox")  # always run (when the roles allow)
OPTIONAL_ANALYSES = ("competing", "parametric", "sample_size", "landmark", "performance")


def resolved_settings(settings: Mapping | None) -> dict[str, dict]:
    """The core analyses' settings, and the optional ones named, with defaults filled in."""
    settings = settings or {}
    names = [*CORE_ANALYSES, *(n for n in OPTIONAL_ANALYSES if settings.get(n) is not None)]
    return {name: {**ANALYSIS_DEFAULTS[name], **dict(settings.get(name) or {})} for name in names}


def categorical_covariates(frame: pd.DataFrame, covariates) -> tuple[str, ...]:
    """Covariates the prepared frame holds as categories (text columns and declared ones)."""
    return tuple(c for c in covariates if isinstance(frame[c].dtype, pd.CategoricalDtype))


MODEL_STRATA = "_model_strata"  # a model's strata column when it is not the strata role


def source_column(prepared: PreparedData, source: pd.DataFrame | None, column: str) -> pd.Series:
    """The values of ``column`` as read (``source``, the frame ``prepare`` was given) for the
    prepared rows, or the prepared frame's own column when no source is given."""
    if source is not None and column in source.columns:
        return source.loc[prepared.frame.index, column]
    if column in prepared.frame.columns:
        return prepared.frame[column]
    raise RoleError(
        f"The settings name the column {column!r}, which the data do not have; choose one of "
        "the data's columns or leave the setting out.",
        column=column,
    )


def strata_values(
    prepared: PreparedData, strata, source: pd.DataFrame | None = None
) -> pd.Series | None:
    """The strata a setting asks for: None the strata role, False none, a name that column."""
    if strata is None:
        return prepared.frame["_strata"] if "_strata" in prepared.frame.columns else None
    if strata is False or strata == "":
        return None
    return source_column(prepared, source, str(strata)).astype("category")


def fit_cox_from_roles(
    prepared: PreparedData,
    *,
    ties: str,
    confidence: float,
    covariates=None,
    strata=None,
    reference=None,
    source: pd.DataFrame | None = None,
    **options,
):
    """The Cox model the roles describe (their covariates, reference levels, strata, entry),
    or a variant of it: a subset of the covariates, other reference levels, other strata."""
    frame, roles = prepared.frame, prepared.roles
    chosen = list(roles.covariates) if covariates is None else [str(c) for c in covariates]
    outside = [c for c in chosen if c not in roles.covariates]
    if outside:
        raise RoleError(
            f"The model's covariates {outside!r} are not among the covariates of the roles "
            f"{list(roles.covariates)!r}; add them to the roles first.",
            column=outside[0],
        )
    levels = {**dict(roles.reference), **{str(c): level for c, level in (reference or ())}}
    stratum = strata_values(prepared, strata, source)
    strata_column = None
    if stratum is not None:
        strata_column = "_strata" if strata is None else MODEL_STRATA
        if strata_column == MODEL_STRATA:
            frame = frame.assign(**{MODEL_STRATA: stratum.to_numpy()})
    return fit_cox(
        frame,
        chosen,
        categorical=categorical_covariates(frame, chosen),
        reference={c: levels[c] for c in chosen if c in levels} or None,
        strata=strata_column,
        entry="_entry" if "_entry" in frame.columns else None,
        ties=ties,
        confidence=confidence,
        **options,
    )


def fit_cox_from_settings(
    prepared: PreparedData, cox: Mapping, source: pd.DataFrame | None = None, **options
):
    """The Cox model of resolved ``"cox"`` settings (the model the Regression page shows)."""
    return fit_cox_from_roles(
        prepared,
        ties=cox["ties"],
        confidence=cox["confidence"],
        covariates=cox["covariates"],
        strata=cox["strata"],
        reference=cox["reference"],
        source=source,
        **options,
    )


def comparison_frame(
    prepared: PreparedData, *, cut=None, strata=None, source: pd.DataFrame | None = None
) -> pd.DataFrame | None:
    """Time, event (and entry) with ``_group`` as the comparison's groups and ``_strata`` as its
    strata; rows without a group or stratum stay in (the tests leave them out and count them).
    None when there is no grouping: neither a group role nor a cut."""
    frame = prepared.frame
    out = frame[[c for c in ("_time", "_event", "_entry") if c in frame.columns]].copy()
    if cut:
        column = str(cut["column"])
        values = source_column(prepared, source, column)
        out["_group"] = cut_at_quantiles(values, int(cut["groups"]), column)
    elif "_group" in frame.columns:
        out["_group"] = frame["_group"]
    else:
        return None
    stratum = strata_values(prepared, strata, source)
    if stratum is not None:
        out["_strata"] = stratum
    return out


def comparison_section(
    prepared: PreparedData,
    test: str,
    rho: float,
    gamma: float,
    *,
    cut=None,
    strata=None,
    source: pd.DataFrame | None = None,
) -> dict | None:
    """The "comparison" object, or None without at least two groups."""
    frame = comparison_frame(prepared, cut=cut, strata=strata, source=source)
    if frame is None or frame["_group"].nunique(dropna=True) < 2:
        return None
    result = compare_frame(frame, test=test, rho=rho, gamma=gamma).to_dict()
    return {k: result[k] for k in COMPARISON_KEYS}


def run_analysis(
    prepared: PreparedData, settings: Mapping | None = None, source: pd.DataFrame | None = None
) -> dict:
    """The "data", "curves", "comparison" and "cox" sections for these settings, and a section
    for each optional analysis the settings name (see ``engine.analysis_extra``).

    ``source`` is the frame ``prepare`` was given: a comparison cut or strata column, or a
    model's strata column, is read from it (it may be left out when the settings name none)."""
    chosen = resolved_settings(settings)
    curves, comparison, cox = chosen["curves"], chosen["comparison"], chosen["cox"]
    sections: dict = {
        "data": prepared.report.to_dict(),
        "curves": curves_json(
            prepared.frame,
            times=curves["times"] or (),
            confidence=curves["confidence"],
            transform=curves["ci_transform"],
        ),
        "comparison": comparison_section(
            prepared,
            comparison["test"],
            comparison["rho"],
            comparison["gamma"],
            cut=comparison["cut"],
            strata=comparison["strata"],
            source=source,
        ),
        "cox": None,
    }
    model = prepared.roles.covariates if cox["covariates"] is None else cox["covariates"]
    if prepared.roles.covariates and model:
        result = fit_cox_from_settings(prepared, cox, source=source)
        sections["cox"] = cox_json(result, proportional_hazards_test(result, cox["ph_transform"]))
    from engine.analysis_extra import extra_sections  # the optional analyses

    sections.update(extra_sections(prepared, chosen))
    return sections
