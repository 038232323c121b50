"""One analysis run from settings: the sections of the JSON object (schema 2).

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

from collections.abc import Callable, Mapping

import pandas as pd

from engine.cox.diagnostics import proportional_hazards_test
from engine.cox.fit import cox_json, fit_cox
from engine.errors import HazelError, RoleError, SettingError
from engine.prepare.checks import PreparedData
from engine.prepare.columns import cut_at_quantiles
from engine.survival.compare import compare_frame
from engine.survival.summary import COMPARISON_KEYS, curves_json

ANALYSIS_DEFAULTS: dict[str, dict] = {
    # rmst_horizon: None (no restricted mean) or τ; rmst_origin: "zero" or "first_entry"
    "curves": {
        "times": [],
        "ci_transform": "log-log",
        "confidence": 0.95,
        "rmst_horizon": None,
        "rmst_origin": "zero",
    },
    # cut: None (the group role) or {"column": numeric column, "groups": k};
    # strata: None (the strata role), False (none) or a column
    "comparison": {"test": "logrank", "rho": 0.0, "gamma": 0.0, "cut": None, "strata": None},
    # covariates: None (the roles' list) or a list; reference: None (the roles' reference
    # levels) or [column, level] pairs that replace them; strata as for the comparison.
    # confidence: the hazard-ratio intervals' level (the Regression page shows 95%)
    "cox": {
        "ties": "efron",
        "confidence": 0.95,
        "ph_time_scale": "survival",  # engine.cox.diagnostics.TIME_SCALES
        "covariates": None,
        "strata": None,
        "reference": None,
        # variance: "auto" (robust, clustered by id, when ids repeat), "model" or "robust";
        # splines: [{"variable", "knots" (3-7), "reference" (None: the median)}];
        # split: None or {"times": [...], "changing": [covariates whose effect may change]}
        "variance": "auto",
        "splines": [],
        "split": None,
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
        "distributions": ["exponential", "weibull", "log-normal", "log-logistic"],
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
    # rho, gamma: the Fleming–Harrington weights when test is "fleming-harrington"
    "landmark": {"time": None, "test": "logrank", "rho": 0.0, "gamma": 0.0},
    # variables: subgroup columns; groups: quantile groups for a numeric one
    "subgroups": {"variables": [], "groups": 2},
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
    # group: None (the group role), False (all rows only) or a column; variables: None (the
    # covariates, or every column without a role when there are none) or a list; categorical:
    # numeric columns to describe by their levels (besides the roles' categorical covariates);
    # summary: "median" (quartiles) or "mean" (SD); compare: None, "smd" or "test"
    "baseline": {
        "group": None,
        "variables": None,
        "categorical": [],
        "summary": "median",
        "compare": None,
    },
}
CORE_ANALYSES = ("curves", "comparison", "cox")  # always run (when the roles allow)
OPTIONAL_ANALYSES = (
    "competing", "parametric", "sample_size", "landmark", "performance", "subgroups", "baseline",
)  # fmt: skip


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
    or a variant of it: a subset of the covariates, other reference levels, other strata.
    With an id role the variance is robust, clustered by id, when ids repeat (``variance``
    "auto", the default; "model" or "robust" force one)."""
    frame, chosen, arguments = cox_model_inputs(
        prepared, covariates=covariates, strata=strata, reference=reference, source=source
    )
    return fit_cox(frame, chosen, ties=ties, confidence=confidence, **arguments, **options)


def cox_model_inputs(
    prepared: PreparedData,
    *,
    covariates=None,
    strata=None,
    reference=None,
    source: pd.DataFrame | None = None,
) -> tuple[pd.DataFrame, list[str], dict]:
    """The frame, covariates and ``fit_cox`` keywords (categorical, reference, strata, entry,
    clusters) of the model the roles and these choices describe; shared by the model and the
    analyses built on it (splines, follow-up split, subgroups)."""
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
    return (
        frame,
        chosen,
        {
            "categorical": categorical_covariates(frame, chosen),
            "reference": {c: levels[c] for c in chosen if c in levels} or None,
            "strata": strata_column,
            "strata_name": None
            if stratum is None
            else (prepared.roles.strata if strata is None else str(strata)),
            "entry": "_entry" if "_entry" in frame.columns else None,
            "clusters": "_id" if "_id" in frame.columns else None,
        },
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
        **{"variance": cox.get("variance", "auto"), **options},
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
    for each optional analysis the settings name (see ``engine.analysis.extra``).

    ``source`` is the frame ``prepare`` was given: a comparison cut or strata column, or a
    model's strata column, is read from it (it may be left out when the settings name none)."""
    chosen = resolved_settings(settings)
    nothing = prepared.report.no_usable_rows()
    if nothing is not None:
        return nothing_usable_sections(prepared, chosen, nothing)
    curves, comparison, cox = chosen["curves"], chosen["comparison"], chosen["cox"]
    sections: dict = {
        "data": prepared.report.to_dict(),
        "curves": computed(
            curves_json,
            prepared.frame,
            times=curves["times"] or (),
            confidence=curves["confidence"],
            transform=curves["ci_transform"],
            rmst_horizon=curves["rmst_horizon"],
            rmst_origin=curves["rmst_origin"],
        ),
        "comparison": computed(
            comparison_section,
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
        sections["cox"] = computed(cox_section, prepared, cox, source)
    from engine.analysis.extra import extra_sections  # the optional analyses

    sections.update(extra_sections(prepared, chosen, source))
    return sections


def nothing_usable_sections(prepared: PreparedData, chosen: Mapping, reason: str) -> dict:
    """The sections of a run in which no row is usable: each section the roles and settings ask
    for says so in words, with the exclusion counts (``DataReport.no_usable_rows``)."""
    roles, cox = prepared.roles, chosen["cox"]
    asked = {
        "curves": True,
        "comparison": bool(roles.group or chosen["comparison"]["cut"]),
        "cox": bool(roles.covariates and (cox["covariates"] is None or cox["covariates"])),
        **{name: True for name in OPTIONAL_ANALYSES if name in chosen},
    }
    return {
        "data": prepared.report.to_dict(),
        **{name: not_computed(reason) if on else None for name, on in asked.items()},
    }


def cox_section(prepared: PreparedData, cox: Mapping, source: pd.DataFrame | None) -> dict:
    """The "cox" object; a proportional-hazards check that cannot be computed says why in its
    own place (``ph_check``) while the model's estimates stay."""
    result = fit_cox_from_settings(prepared, cox, source=source)
    check = computed(proportional_hazards_test, result, cox["ph_time_scale"])
    if is_not_computed(check):
        section = {**cox_json(result), "ph_check": check}
    else:
        section = cox_json(result, check)
    section.update(cox_additions(prepared, cox, source))
    return section


def cox_additions(prepared: PreparedData, cox: Mapping, source: pd.DataFrame | None) -> dict:
    """The "splines" and "time_split" entries of the "cox" object: the same model with the
    chosen covariates as splines, and refitted on follow-up split at times."""
    from engine.cox.splines import fit_splines
    from engine.prepare.episodes import fit_split

    frame, chosen, arguments = cox_model_inputs(
        prepared,
        covariates=cox["covariates"],
        strata=cox["strata"],
        reference=cox["reference"],
        source=source,
    )
    common = {"ties": cox["ties"], "confidence": cox["confidence"], "variance": cox["variance"]}
    out: dict = {"splines": [], "time_split": None}
    if cox["splines"]:
        out["splines"] = computed(
            lambda: fit_splines(frame, chosen, cox["splines"], **arguments, **common).to_dict()
        )
    if cox["split"]:
        split = dict(cox["split"])
        arguments = {k: v for k, v in arguments.items() if k not in ("entry", "clusters")}
        out["time_split"] = computed(
            lambda: fit_split(
                frame,
                chosen,
                split.get("times") or (),
                split.get("changing") or (),
                ph_time_scale=cox["ph_time_scale"],
                **arguments,
                **common,
            ).to_dict()
        )
    return out


# --- sections that cannot be computed -------------------------------------------------------------

NOT_COMPUTED = "not_computed"


def not_computed(reason: object) -> dict:
    """The JSON form of a section that cannot be computed on these data: ``{"not_computed":
    reason}``, the reason being the engine's own message (what is wrong and what to try)."""
    return {NOT_COMPUTED: " ".join(str(reason).split())}


def is_not_computed(section: object) -> bool:
    return isinstance(section, Mapping) and NOT_COMPUTED in section


def computed(make: Callable, *args, **kwargs):
    """``make(*args, **kwargs)``, or ``not_computed(reason)`` when the data or settings do not
    allow it (a ``HazelError``): one section's failure never costs the run its other sections.
    A ``SettingError`` (the request itself is wrong) still stops the run, and anything else is a
    bug in Hazel and is not hidden."""
    try:
        return make(*args, **kwargs)
    except SettingError:
        raise
    except HazelError as error:
        return not_computed(error)
