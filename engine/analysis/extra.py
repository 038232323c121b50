"""The optional sections of an analysis run: competing risks, parametric models, sample size and
power, and a landmark analysis. Each runs only when the settings name it, and each returns the
JSON-ready object the command line writes, the report shows and the app's pages reproduce.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace

import numpy as np
import pandas as pd

from engine.errors import AnalysisError
from engine.json_values import frame_records, json_value
from engine.prepare.checks import PreparedData


def extra_sections(prepared: PreparedData, settings: Mapping[str, dict], source=None) -> dict:
    """A section per optional analysis present in ``settings`` (already resolved); one that
    cannot be computed is ``{"not_computed": reason}``. ``source`` is the frame ``prepare`` was
    given (a subgroup column may come from it; the baseline table describes its columns as
    read)."""
    from engine.analysis.run import computed

    makers = {
        "competing": competing_section,
        "parametric": parametric_section,
        "sample_size": lambda _prepared, chosen: sample_size_section(chosen),
        "landmark": landmark_section,
        "performance": performance_section,
        "subgroups": lambda prepared, chosen: subgroups_section(prepared, chosen, source),
        "baseline": lambda prepared, chosen: baseline_section(prepared, chosen, source),
    }
    confidence = settings["curves"]["confidence"]
    out = {}
    for name, maker in makers.items():
        if name in settings:
            chosen = {**settings[name], "confidence": confidence}
            if name == "landmark":
                chosen = {**chosen, "curves": settings["curves"]}
            if name in ("competing", "subgroups"):
                chosen = {**chosen, "ties": settings["cox"]["ties"]}
            if name in ("performance", "subgroups"):
                chosen = {**chosen, "cox": settings["cox"]}
            out[name] = computed(maker, prepared, chosen)
    return out


def competing_section(prepared: PreparedData, chosen: Mapping) -> dict:
    """Aalen–Johansen incidence per cause (and group) at the chosen times and at the end of
    follow-up, the 1 − KM warning, and cause-specific Cox models when covariates are set."""
    from engine.analysis.run import computed
    from engine.competing.incidence import cumulative_incidence

    frame, roles = prepared.frame, prepared.roles
    result = cumulative_incidence(
        frame, by_group=bool(chosen["by_group"]), confidence_level=chosen["confidence"]
    )
    section = incidence_section(result, chosen["times"])
    if chosen["cause_specific_cox"] and roles.covariates and "_cause" in frame.columns:
        section["cause_specific_cox"] = computed(cause_specific_section, prepared, chosen)
    # the parts below can fail on their own (a cause with no events...): each says why in place
    section["gray_test"] = (
        computed(gray_test_section, prepared) if chosen.get("gray_test", True) else None
    )
    section["fine_gray"] = None
    if chosen.get("fine_gray"):
        section["fine_gray"] = computed(fine_gray_section, prepared, chosen)
    return section


def incidence_section(result, times) -> dict:
    """The incidence part of the "competing" section: causes, groups, the 1 − KM warning, the
    incidence at the chosen times and at the end of follow-up (shared with the databases)."""
    table = result.to_frame()
    last = table.groupby(["group", "cause"], sort=False, dropna=False).tail(1)
    final = last[["group", "cause", "time", "cumulative_incidence", "lower", "upper"]]
    return {
        "causes": list(result.causes),
        "groups": list(result.groups),
        "confidence_level": result.confidence_level,
        "warning": result.warning,
        "at_times": frame_records(result.at(times)) if times else [],
        "at_end": frame_records(final.assign(one_minus_km=last["one_minus_km"].to_numpy())),
        "cause_specific_cox": None,
    }


def cause_specific_section(prepared: PreparedData, chosen: Mapping) -> list[dict]:
    """A Cox model per cause on the roles' covariates (the other causes censored)."""
    from engine.analysis.run import categorical_covariates
    from engine.competing.incidence import cause_specific_cox

    frame, roles = prepared.frame, prepared.roles
    models = cause_specific_cox(
        frame,
        list(roles.covariates),
        categorical=categorical_covariates(frame, roles.covariates),
        reference=dict(roles.reference),
        ties=chosen["ties"],
        confidence=chosen["confidence"],
    )
    return [
        {"cause": cause, "n": model.n, "events": model.events, "terms": model.to_dict()["terms"]}
        for cause, model in models.models
    ]


def gray_test_section(prepared: PreparedData) -> list[dict] | None:
    """Gray's test per cause across the groups; None without causes or two groups."""
    from engine.competing.gray_test import gray_tests

    frame = prepared.frame
    if "_cause" not in frame.columns or "_group" not in frame.columns:
        return None
    if frame["_group"].nunique(dropna=True) < 2:
        return None
    return [test.to_dict() for test in gray_tests(frame)]


def fine_gray_section(prepared: PreparedData, chosen: Mapping) -> dict:
    """The Fine–Gray model of the chosen cause on the roles' covariates, with the predicted
    cumulative incidence of the typical subject at the chosen times."""
    from engine.analysis.run import categorical_covariates
    from engine.competing.fine_gray import MEANING, fit_fine_gray

    frame, roles = prepared.frame, prepared.roles
    if not roles.covariates:
        raise AnalysisError(
            "The Fine–Gray model needs covariates; set them (--covariates A,B) or leave out "
            "--fine-gray."
        )
    result = fit_fine_gray(
        frame,
        list(roles.covariates),
        str(chosen["fine_gray"]),
        categorical=categorical_covariates(frame, roles.covariates),
        reference=dict(roles.reference),
        ties=chosen["ties"],
        confidence=chosen["confidence"],
    )
    curve = result.predict_incidence({"typical": {}})
    times = np.asarray(chosen["times"] or [], dtype=float)
    idx = np.searchsorted(curve["time"].to_numpy(), times, side="right") - 1
    at_times = [
        {"time": float(t), "cumulative_incidence": json_value(curve["cumulative_incidence"][i])}
        for t, i in zip(times, idx, strict=True)
    ]
    out = {**result.to_dict(), "meaning": MEANING, "typical_at_times": at_times}
    if roles.strata:
        out["warnings"].append(
            f"The strata role ({roles.strata}) is not used by the Fine–Gray model: it has one "
            "baseline for all rows. Add the strata column as a covariate to adjust for it."
        )
    return out


def performance_section(prepared: PreparedData, chosen: Mapping) -> dict:
    """Discrimination, accuracy and calibration of the Cox model the settings describe, and
    the bootstrap correction for optimism (unless replicates is 0)."""
    from engine.analysis.run import fit_cox_from_settings
    from engine.prediction.optimism import bootstrap_optimism
    from engine.prediction.performance import prediction_performance

    if not prepared.roles.covariates:
        raise AnalysisError(
            "Prediction performance is measured on a Cox model, which needs covariates; set "
            "them (--covariates A,B) or leave out --performance."
        )
    model = fit_cox_from_settings(prepared, chosen["cox"], without_each=False)
    result = prediction_performance(
        model,
        chosen["times"],
        tau=chosen["tau"],
        calibration_time=chosen["calibration_time"],
        risk_groups=int(chosen["risk_groups"]),
        confidence=chosen["confidence"],
    )
    section = result.to_dict()
    if int(chosen["replicates"]) > 0:
        section["optimism"] = bootstrap_optimism(
            model, replicates=int(chosen["replicates"]), seed=int(chosen["seed"])
        ).to_dict()
    return section


def parametric_section(prepared: PreparedData, chosen: Mapping) -> dict:
    """AIC table, median and survival at times (extrapolation flagged), and with covariates the
    chosen family as an accelerated failure time model."""
    from engine.analysis.run import computed
    from engine.parametric.aft import fit_aft
    from engine.parametric.fits import fit_parametric

    frame, roles = prepared.frame, prepared.roles
    result = fit_parametric(
        frame,
        by_group=bool(chosen["by_group"]),
        distributions=tuple(chosen["distributions"]),
        times=chosen["times"] or (),
        horizon=chosen["horizon"],
        confidence_level=chosen["confidence"],
    )
    section = {
        "aic_table": frame_records(result.aic_table),
        "estimates": frame_records(result.estimates),
        "failed": [{"distribution": d, "group": g, "reason": r} for d, g, r in result.failed],
        "rows_time_zero": result.rows_time_zero,  # left out: no family has a density at 0
        "max_time": json_value(float(np.nanmax(frame["_time"].to_numpy(float)))),
        "aft": None,
    }
    if roles.covariates and chosen["aft_distribution"]:
        section["aft"] = computed(
            lambda: fit_aft(
                frame,
                list(roles.covariates),
                chosen["aft_distribution"],
                confidence_level=chosen["confidence"],
            ).to_dict()
        )
    return section


def sample_size_section(chosen: Mapping) -> dict:
    """Events and subjects needed by both formulas, and the power of a given number of events."""
    from engine.survival.sample_size import METHODS, events_needed, power_for_events

    design = {
        "alpha": chosen["alpha"],
        "sides": int(chosen["sides"]),
        "allocation_ratio": chosen["allocation_ratio"],
    }
    section = {
        "needed": [
            events_needed(
                chosen["hazard_ratio"],
                power=chosen["power"],
                event_probability=chosen["event_probability"],
                method=method,
                **design,
            ).to_dict()
            for method in METHODS
        ],
        "power": None,
    }
    if chosen.get("events"):
        section["power"] = [
            {
                "method": method,
                "events": float(chosen["events"]),
                "hazard_ratio": float(chosen["hazard_ratio"]),
                "power": power_for_events(
                    float(chosen["events"]), chosen["hazard_ratio"], method=method, **design
                ),
            }
            for method in METHODS
        ]
    return section


def landmark_section(prepared: PreparedData, chosen: Mapping) -> dict:
    """Curves and the group comparison among subjects still at risk at the landmark time."""
    from engine.analysis.run import comparison_section, computed
    from engine.survival.landmark import landmark
    from engine.survival.summary import curves_json

    if chosen["time"] is None:
        raise AnalysisError(
            "The landmark analysis needs a landmark time (settings 'landmark': {'time': ...})."
        )
    selected = landmark(prepared.frame, float(chosen["time"]))
    curves = chosen["curves"]
    sub = replace(prepared, frame=selected.frame)  # the same roles, the landmark's rows
    return {
        **selected.to_dict(),
        "curves": curves_json(
            selected.frame,
            times=curves["times"] or (),
            confidence=curves["confidence"],
            transform=curves["ci_transform"],
        ),
        "comparison": computed(
            comparison_section,
            sub,
            chosen["test"],
            float(chosen.get("rho", 0.0)),
            float(chosen.get("gamma", 0.0)),
        ),
    }


def subgroups_section(prepared: PreparedData, chosen: Mapping, source=None) -> dict:
    """The group role as a two-level treatment: its hazard ratio within each level of the
    chosen variables, with the interaction tests (``engine.cox.subgroups``)."""
    from engine.analysis.run import cox_model_inputs, source_column
    from engine.cox.subgroups import fit_subgroups

    if "_group" not in prepared.frame.columns:
        raise AnalysisError(
            "Subgroup effects need a group column with two levels as the treatment; set the "
            "group role."
        )
    names = [str(v) for v in chosen["variables"]]
    if not names:
        raise AnalysisError(
            "Subgroup effects need at least one subgroup variable (settings 'subgroups': "
            "{'variables': [...]})."
        )
    cox = chosen["cox"]
    frame, _, arguments = cox_model_inputs(
        prepared, covariates=[], strata=cox["strata"], source=source
    )
    variables = {
        name: frame[name] if name in frame.columns else source_column(prepared, source, name)
        for name in names
    }
    result = fit_subgroups(
        frame,
        variables,
        treatment_name=prepared.roles.group,
        groups=int(chosen["groups"]),
        strata=arguments["strata"],
        entry=arguments["entry"],
        clusters=arguments["clusters"],
        ties=chosen["ties"],
        confidence=cox["confidence"],
        variance=cox["variance"],
    )
    return result.to_dict()


def baseline_columns(prepared: PreparedData, source) -> list[str]:
    """The columns a baseline table describes by default: the covariates, or, without any,
    every column of the file that has no role and holds no dates."""
    roles = prepared.roles
    if roles.covariates:
        return list(roles.covariates)
    frame = source if source is not None else prepared.frame
    taken = {
        roles.time, roles.start, roles.end, roles.event, roles.group, roles.strata, roles.entry,
        roles.id,
    }  # fmt: skip
    return [
        str(c)
        for c in frame.columns
        if str(c) not in taken
        and not str(c).startswith("_")
        and not pd.api.types.is_datetime64_any_dtype(frame[c])
    ]


def baseline_table_from_settings(prepared: PreparedData, chosen: Mapping, source=None):
    """The ``engine.analysis.baseline.BaselineTable`` the settings describe, on the prepared
    rows."""
    from engine.analysis.baseline import baseline_table
    from engine.analysis.run import source_column

    variables = chosen.get("variables")
    variables = baseline_columns(prepared, source) if variables is None else list(variables)
    values = pd.DataFrame(
        {str(v): source_column(prepared, source, str(v)).to_numpy() for v in variables},
        index=prepared.frame.index,
    )
    group, group_name = chosen.get("group"), None
    if group is None and "_group" in prepared.frame.columns:
        groups, group_name = prepared.frame["_group"], prepared.roles.group
    elif group in (None, False, ""):
        groups = None
    else:
        groups = source_column(prepared, source, str(group))
        groups = pd.Series(groups.to_numpy(), index=prepared.frame.index)
        group_name = str(group)
    categorical = {*prepared.roles.categorical, *(chosen.get("categorical") or ())}
    return baseline_table(
        values,
        groups,
        group_name=group_name,
        categorical=sorted(categorical),
        summary=chosen.get("summary", "median"),
        compare=chosen.get("compare"),
    )


def baseline_section(prepared: PreparedData, chosen: Mapping, source=None) -> dict:
    """``{"group": column or None, "rows": [...]}`` (and ``balance`` when asked for)."""
    return baseline_table_from_settings(prepared, chosen, source).to_dict()
