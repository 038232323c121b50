"""`run_analysis` for data that stay in a database: the same sections from per-time sums.

Sections that need the rows themselves (a comparison cut at a column's quantiles, strata from a
column without a role, parametric and landmark analyses, the Fine–Gray model) say so in one
sentence as ``{"not_computed": reason}`` instead of silently changing meaning. Harrell's C comes
from score bins, with the bound on its error beside it (``concordance_counts``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace

from engine.aggregate.cox_fit import fit_cox_from_sums
from engine.aggregate.estimators import compare_from_counts, curves_from_counts
from engine.aggregate.sql_checks import AggregatedData
from engine.aggregate.sql_cox import SqlCoxSource, sql_design
from engine.analysis.run import (
    CORE_ANALYSES,
    computed,
    is_not_computed,
    not_computed,
    resolved_settings,
)
from engine.cox.fit import cox_json
from engine.errors import RoleError
from engine.json_values import json_float
from engine.survival.summary import COMPARISON_KEYS, curve_set_json

SAMPLE_HINT = (
    "; run it with --backend memory on the rows, or add --sample-rows N to compute it on a "
    "random sample of N rows."
)
NEEDS_ROWS = {
    "parametric": "Parametric fits need the rows, which stay in the database",
    "landmark": "A landmark analysis is not yet computed from per-time sums",
    "performance": "Prediction performance needs each row's risk score",
    "subgroups": "Subgroup effects are not yet computed from per-time sums",
    "baseline": "A baseline table needs the rows, which stay in the database",
}


def comparison_from_data(data: AggregatedData, chosen: Mapping) -> dict | None:
    if chosen["cut"]:
        return not_computed(
            "A comparison of a column cut at its quantiles is not computed from per-time sums"
            + SAMPLE_HINT
        )
    strata = chosen["strata"]
    if strata not in (None, False, ""):
        return not_computed(
            f"Strata from the column {strata!r}, which has no role, are not computed from "
            "per-time sums; give it the strata role instead."
        )
    counts = data.counts
    if counts.group_labels is None:
        return None
    groups = counts.exits.loc[counts.exits["group"] >= 0, "group"].nunique()
    if groups < 2:
        return None
    stratified = counts.strata_labels is not None and strata is None
    result = compare_from_counts(
        counts,
        test=chosen["test"],
        rho=chosen["rho"],
        gamma=chosen["gamma"],
        stratified=stratified,
    ).to_dict()
    return {k: result[k] for k in COMPARISON_KEYS}


def cox_from_data(
    data: AggregatedData,
    chosen: Mapping,
    *,
    drop_one: bool = True,
    event: str = "_event",
    concordance: bool = True,
    clusters: bool | None = None,
):
    """The Cox model of the roles (or the settings' variant of it) from per-time sums; the
    ``CoxResult``, its PH test (or ``{"not_computed": reason}``) and the SQL source (which
    counts its passes). ``event``: the SQL of the event (a cause-specific model's cause);
    ``clusters``: the rows without an id left out (None: when the roles name an id)."""
    roles = data.roles
    covariates = list(roles.covariates) if chosen["covariates"] is None else chosen["covariates"]
    outside = [c for c in covariates if c not in roles.covariates]
    if outside:
        raise RoleError(
            f"The model's covariates {outside!r} are not among the covariates of the roles "
            f"{list(roles.covariates)!r}; add them to the roles first.",
            column=outside[0],
        )
    strata = chosen["strata"]
    use_strata = strata is None and roles.strata is not None
    levels = {**dict(roles.reference), **{str(c): v for c, v in (chosen["reference"] or ())}}
    categorical = [c for c in covariates if data.kinds[c] == "categorical"]
    design, rows, bounds, not_estimable = sql_design(
        data,
        covariates,
        categorical=categorical,
        reference={c: levels[c] for c in covariates if c in levels} or None,
        strata=roles.strata if use_strata else None,
        event=event,
        clusters=roles.id is not None if clusters is None else clusters,
    )
    strata_keys = data.levels["_strata"].keys if use_strata else None
    source = SqlCoxSource(data, rows, bounds, strata_keys)
    result, ph = fit_cox_from_sums(
        source,
        design,
        ties=chosen["ties"],
        confidence=chosen["confidence"],
        drop_one=drop_one,
        ph_time_scale=chosen["ph_time_scale"],
        concordance=source.concordance if concordance else None,
        not_estimable=not_estimable,
        strata=roles.strata if use_strata else None,
    )
    return result, ph, source


def cox_section(data: AggregatedData, cox: Mapping) -> dict:
    """The "cox" object with the keys memory gives; what needs the rows says so."""
    if cox["strata"] not in (None, False, ""):
        return not_computed(
            f"A model stratified by the column {cox['strata']!r}, which has no role, is not "
            "computed from per-time sums; give it the strata role instead."
        )
    variance = cox.get("variance", "auto")
    repeats = ids_repeat_in_model(data, cox)
    if variance == "robust" or (variance == "auto" and repeats):
        because = (
            f" (the id column {data.roles.id!r} repeats: several rows belong to one subject)"
            if variance == "auto"
            else ""
        )
        return not_computed(
            f"The robust (sandwich) variance{because} needs each row's score residuals, which "
            "per-time sums do not keep" + SAMPLE_HINT
        )
    result, ph, _ = cox_from_data(data, cox)
    if repeats and result.concordance is not None:  # C's standard error sums each subject's
        # pairs over its rows, which the counts do not keep
        result = replace(
            result, concordance=replace(result.concordance, standard_error=float("nan"))
        )
    section = {**cox_json(result), "ph_check": ph} if is_not_computed(ph) else cox_json(result, ph)
    section = with_error_bound(section, result.concordance)
    section["splines"] = (
        not_computed("Splines are not yet computed from per-time sums" + SAMPLE_HINT)
        if cox.get("splines")
        else []
    )
    section["time_split"] = (
        not_computed("A follow-up split is not yet computed from per-time sums" + SAMPLE_HINT)
        if cox.get("split")
        else None
    )
    return section


def ids_repeat_in_model(data: AggregatedData, cox: Mapping) -> bool:
    """Whether an id occurs on two or more of the model's rows (complete cases): where
    ``fit_cox``'s "auto" variance becomes the robust one."""
    from engine.aggregate.sql_cox import model_required

    roles = data.roles
    if roles.id is None:
        return False
    covariates = list(roles.covariates) if cox["covariates"] is None else cox["covariates"]
    use_strata = cox["strata"] is None and roles.strata is not None
    required = model_required(data, covariates, strata=use_strata, clusters=True)
    complete = " AND ".join(f"{c} IS NOT NULL" for c in required)
    found = data.source.query(
        f"SELECT COUNT(*) AS k FROM (SELECT _id FROM ({data.clean}) AS checked WHERE "
        f"_reason IS NULL AND {complete} GROUP BY _id HAVING SUM(_n) > 1 LIMIT 1) AS r"
    )
    return int(found["k"].iloc[0]) > 0


def with_error_bound(section: dict, concordance) -> dict:
    """The section with ``concordance_error_bound`` after ``concordance_se``: how far the C of
    score bins can be from the exact C (0 when each distinct score is its own bin)."""
    out = {}
    for key, value in section.items():
        out[key] = value
        if key == "concordance_se":
            out["concordance_error_bound"] = json_float(concordance.error_bound)
    return out


def run_aggregate_analysis(data: AggregatedData, settings: Mapping | None = None) -> dict:
    """The sections of ``engine.analysis.run.run_analysis`` from the database's per-time sums."""
    chosen = resolved_settings(settings)
    curves, comparison, cox = chosen["curves"], chosen["comparison"], chosen["cox"]

    def curve_sections():
        curve_set = curves_from_counts(
            data.counts, confidence=curves["confidence"], transform=curves["ci_transform"]
        )
        return curve_set_json(
            curve_set, curves["times"] or (), curves["rmst_horizon"], curves["rmst_origin"]
        )

    sections: dict = {
        "data": data.report.to_dict(),
        "curves": computed(curve_sections),
        "comparison": computed(comparison_from_data, data, comparison),
        "cox": None,
    }
    model = data.roles.covariates if cox["covariates"] is None else cox["covariates"]
    if data.roles.covariates and model:
        sections["cox"] = computed(cox_section, data, cox)
    for name in chosen:
        if name in CORE_ANALYSES:
            continue
        if name == "competing":
            from engine.aggregate.competing import competing_from_data

            sections[name] = computed(
                competing_from_data,
                data,
                {**chosen[name], "confidence": curves["confidence"], "ties": cox["ties"]},
            )
        elif name == "sample_size":
            from engine.analysis.extra import sample_size_section

            sections[name] = computed(
                sample_size_section, {**chosen[name], "confidence": curves["confidence"]}
            )
        else:
            sections[name] = not_computed(
                NEEDS_ROWS.get(name, f"{name} is not computed from per-time sums") + SAMPLE_HINT
            )
    return sections
