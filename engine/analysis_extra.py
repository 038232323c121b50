"""The optional sections of an analysis run: competing risks, parametric models, sample size and
power, and a landmark analysis. Each runs only when the settings name it, and each returns the
JSON-ready object the command line writes, the report shows and the app's pages reproduce.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace

import numpy as np

from engine.checks import PreparedData
from engine.errors import AnalysisError
from engine.json_values import frame_records, json_value


def extra_sections(prepared: PreparedData, settings: Mapping[str, dict]) -> dict:
    """A section per optional analysis present in ``settings`` (already resolved)."""
    makers = {
        "competing": competing_section,
        "parametric": parametric_section,
        "sample_size": lambda _prepared, chosen: sample_size_section(chosen),
        "landmark": landmark_section,
        "performance": performance_section,
    }
    confidence = settings["curves"]["confidence"]
    out = {}
    for name, maker in makers.items():
        if name in settings:
            chosen = {**settings[name], "confidence": confidence}
            if name == "landmark":
                chosen = {**chosen, "curves": settings["curves"]}
            if name == "competing":
                chosen = {**chosen, "ties": settings["cox"]["ties"]}
            if name == "performance":
                chosen = {**chosen, "cox": settings["cox"]}
            out[name] = maker(prepared, chosen)
    return out


def competing_section(prepared: PreparedData, chosen: Mapping) -> dict:
    """Aalen–Johansen incidence per cause (and group) at the chosen times and at the end of
    follow-up, the 1 − KM warning, and cause-specific Cox models when covariates are set."""
    from engine.analysis import categorical_covariates
    from engine.competing import cause_specific_cox, cumulative_incidence

    frame, roles = prepared.frame, prepared.roles
    result = cumulative_incidence(
        frame, by_group=bool(chosen["by_group"]), confidence_level=chosen["confidence"]
    )
    table = result.to_frame()
    last = table.groupby(["group", "cause"], sort=False, dropna=False).tail(1)
    final = last[["group", "cause", "time", "cumulative_incidence", "lower", "upper"]]
    section = {
        "causes": list(result.causes),
        "groups": list(result.groups),
        "confidence_level": result.confidence_level,
        "warning": result.warning,
        "at_times": frame_records(result.at(chosen["times"])) if chosen["times"] else [],
        "at_end": frame_records(final.assign(one_minus_km=last["one_minus_km"].to_numpy())),
        "cause_specific_cox": None,
    }
    if chosen["cause_specific_cox"] and roles.covariates and "_cause" in frame.columns:
        models = cause_specific_cox(
            frame,
            list(roles.covariates),
            categorical=categorical_covariates(frame, roles.covariates),
            reference=dict(roles.reference),
            ties=chosen["ties"],
            confidence=chosen["confidence"],
        )
        section["cause_specific_cox"] = [
            {
                "cause": cause,
                "n": model.n,
                "events": model.events,
                "terms": model.to_dict()["terms"],
            }
            for cause, model in models.models
        ]
    section["gray_test"] = gray_test_section(prepared) if chosen.get("gray_test", True) else None
    section["fine_gray"] = None
    if chosen.get("fine_gray"):
        section["fine_gray"] = fine_gray_section(prepared, chosen)
    return section


def gray_test_section(prepared: PreparedData) -> list[dict] | None:
    """Gray's test per cause across the groups; None without causes or two groups."""
    from engine.gray_test import gray_tests

    frame = prepared.frame
    if "_cause" not in frame.columns or "_group" not in frame.columns:
        return None
    if frame["_group"].nunique(dropna=True) < 2:
        return None
    return [test.to_dict() for test in gray_tests(frame)]


def fine_gray_section(prepared: PreparedData, chosen: Mapping) -> dict:
    """The Fine–Gray model of the chosen cause on the roles' covariates, with the predicted
    cumulative incidence of the typical subject at the chosen times."""
    from engine.analysis import categorical_covariates
    from engine.fine_gray import MEANING, fit_fine_gray

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
    return {**result.to_dict(), "meaning": MEANING, "typical_at_times": at_times}


def performance_section(prepared: PreparedData, chosen: Mapping) -> dict:
    """Discrimination, accuracy and calibration of the Cox model the settings describe, and
    the bootstrap correction for optimism (unless replicates is 0)."""
    from engine.analysis import fit_cox_from_settings
    from engine.optimism import bootstrap_optimism
    from engine.performance import prediction_performance

    if not prepared.roles.covariates:
        raise AnalysisError(
            "Prediction performance is measured on a Cox model, which needs covariates; set "
            "them (--covariates A,B) or leave out --performance."
        )
    model = fit_cox_from_settings(prepared, chosen["cox"], drop_one=False)
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
    from engine.aft import fit_aft
    from engine.parametric import fit_parametric

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
        "max_time": json_value(float(np.nanmax(frame["_time"].to_numpy(float)))),
        "aft": None,
    }
    if roles.covariates and chosen["aft_distribution"]:
        aft = fit_aft(
            frame,
            list(roles.covariates),
            chosen["aft_distribution"],
            confidence_level=chosen["confidence"],
        )
        section["aft"] = aft.to_dict()
    return section


def sample_size_section(chosen: Mapping) -> dict:
    """Events and subjects needed by both formulas, and the power of a given number of events."""
    from engine.sample_size import METHODS, events_needed, power_for_events

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
    from engine.analysis import comparison_section
    from engine.landmark import landmark
    from engine.summary import curves_json

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
        "comparison": comparison_section(sub, chosen["test"], 0.0, 0.0),
    }
