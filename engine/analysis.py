"""One analysis run from settings: the sections of the schema-1 JSON object.

The command line, the report and a replayed recipe all call `run_analysis`, so the numbers they
show come from one place. Settings use the layout a recipe stores:
``{"curves": {...}, "comparison": {...}, "cox": {...}}``; a missing section or key takes its
default, and the comparison and the Cox model run only when the roles ask for them (a group
column, covariates).
"""

from __future__ import annotations

from collections.abc import Mapping

import pandas as pd

from engine.checks import PreparedData
from engine.compare import compare_frame
from engine.cox import cox_json, fit_cox
from engine.cox_diagnostics import proportional_hazards_test
from engine.summary import curves_json

ANALYSIS_DEFAULTS: dict[str, dict] = {
    "curves": {"times": [], "ci_transform": "log-log", "confidence": 0.95, "rmst_horizon": None},
    "comparison": {"test": "logrank", "rho": 0.0, "gamma": 0.0},
    "cox": {"ties": "efron", "ph_transform": "km"},
    # The analyses below run only when the settings name them (a recipe, --competing ...).
    "competing": {"times": [], "by_group": True, "cause_specific_cox": True},
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
}
CORE_ANALYSES = ("curves", "comparison", "cox")  # always run (when the roles allow)
OPTIONAL_ANALYSES = ("competing", "parametric", "sample_size", "landmark")


def resolved_settings(settings: Mapping | None) -> dict[str, dict]:
    """The core analyses' settings, and the optional ones named, with defaults filled in."""
    settings = settings or {}
    names = [*CORE_ANALYSES, *(n for n in OPTIONAL_ANALYSES if settings.get(n) is not None)]
    return {name: {**ANALYSIS_DEFAULTS[name], **dict(settings.get(name) or {})} for name in names}


def categorical_covariates(frame: pd.DataFrame, covariates) -> tuple[str, ...]:
    """Covariates the prepared frame holds as categories (text columns and declared ones)."""
    return tuple(c for c in covariates if isinstance(frame[c].dtype, pd.CategoricalDtype))


def fit_cox_from_roles(prepared: PreparedData, *, ties: str, confidence: float, **options):
    """The Cox model the roles describe: their covariates, reference levels, strata, entry."""
    frame, roles = prepared.frame, prepared.roles
    return fit_cox(
        frame,
        list(roles.covariates),
        categorical=categorical_covariates(frame, roles.covariates),
        reference=dict(roles.reference),
        strata="_strata" if "_strata" in frame.columns else None,
        entry="_entry" if "_entry" in frame.columns else None,
        ties=ties,
        confidence=confidence,
        **options,
    )


def comparison_section(prepared: PreparedData, test: str, rho: float, gamma: float) -> dict | None:
    """The "comparison" object, or None without at least two groups."""
    frame = prepared.frame
    if "_group" not in frame.columns or frame["_group"].nunique(dropna=True) < 2:
        return None
    result = compare_frame(frame, test=test, rho=rho, gamma=gamma).to_dict()
    return {k: result[k] for k in ("test", "statistic", "df", "p_value")}


def run_analysis(prepared: PreparedData, settings: Mapping | None = None) -> dict:
    """The "data", "curves", "comparison" and "cox" sections for these settings, and a section
    for each optional analysis the settings name (see ``engine.analysis_extra``)."""
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
            prepared, comparison["test"], comparison["rho"], comparison["gamma"]
        ),
        "cox": None,
    }
    if prepared.roles.covariates:
        result = fit_cox_from_roles(prepared, ties=cox["ties"], confidence=curves["confidence"])
        sections["cox"] = cox_json(result, proportional_hazards_test(result, cox["ph_transform"]))
    from engine.analysis_extra import extra_sections  # the optional analyses

    sections.update(extra_sections(prepared, chosen))
    return sections
