"""Effects in depth: whether a continuous covariate's effect is a straight line (splines),
whether an effect changes over follow-up (the model refitted on follow-up split at times), and
whether a treatment's effect is similar across subgroups. Each uses the Regression page's model."""

from __future__ import annotations

import json

import pandas as pd
import streamlit as st

from app import charts_models, compute_effects, data, share_section, ui
from app import effects_settings as keys
from engine.cox.diagnostics import ALL_TERMS
from engine.cox.subgroups import CAUTION
from engine.wording import format_confidence, term_label

st.title("Effects in depth", anchor=False)
st.caption(
    "Three closer looks at the Cox model of the Regression page: is a continuous covariate's "
    "effect a straight line, does an effect change during follow-up, and is the treatment's "
    "effect similar in every subgroup?"
)
table, roles = ui.table_and_roles_or_stop()
prepared = ui.prepared_or_stop(table, roles, "effects can be examined")
frame, unit = prepared.frame, prepared.report.time_unit
roles_text = data.roles_key(roles)
settings = share_section.settings_from_session(st.session_state, roles)
cox = dict(settings.get("cox") or {})
model = list(roles.covariates) if cox.get("covariates") is None else list(cox["covariates"])
numeric = [c for c in model if c in frame and not isinstance(frame[c].dtype, pd.CategoricalDtype)]
if model:
    st.caption(
        f"Model: {', '.join(ui.escape(c) for c in model)}; change it on the Regression page."
    )
style = ui.chart_style()


def _tests_frame(rows: list[dict], name: str) -> pd.DataFrame:
    return pd.DataFrame(
        {
            name: [r["variable"] for r in rows],
            "Chi-square": [ui.fmt_num(r["statistic"]) for r in rows],
            "Degrees of freedom": [r["df"] for r in rows],
            "p-value": [ui.fmt_p(r["p_value"]) for r in rows],
        }
    )


def _ratio_text(value) -> str:
    return "not estimable" if value is None else f"{value:.3f}"


tabs = st.tabs(["Non-linear effects", "Effects over time", "Subgroups"])

# --- splines --------------------------------------------------------------------------------

with tabs[0]:
    st.markdown(
        "A **restricted cubic spline** lets a continuous covariate's effect bend: cubic between "
        "knots placed at standard percentiles of the covariate, straight beyond the outer ones. "
        "The test for non-linearity asks whether the bends matter."
    )
    if not numeric:
        st.info("The model has no numeric covariate; choose one on the Regression page.")
    else:
        cols = st.columns([3, 1, 2])
        ui.remember_choices(keys.SPLINE_VARIABLES, numeric, numeric[:1])
        chosen = cols[0].multiselect("Covariates as splines", numeric, key=keys.SPLINE_VARIABLES)
        ui.remember(keys.SPLINE_KNOTS, 4)
        cols[1].selectbox(
            "Knots",
            keys.KNOT_CHOICES,
            key=keys.SPLINE_KNOTS,
            help="3 to 7; 4 is a common choice (Harrell 2015). More knots follow the data more "
            "closely and need more events.",
        )
        ui.remember(keys.SPLINE_INCLUDE, True)
        cols[2].toggle("In the report and recipe", key=keys.SPLINE_INCLUDE)
        if chosen:
            with ui.guard("The spline model"):
                spline_cox = {**cox, "splines": keys.spline_settings(st.session_state)}
                effects = compute_effects.computed_or_raise(
                    compute_effects.splines(
                        table.sha256, roles_text, json.dumps(spline_cox, sort_keys=True), table
                    )
                )
                tests = pd.DataFrame(
                    {
                        "Covariate": [e["variable"] for e in effects],
                        "Knots at": [", ".join(f"{k:.4g}" for k in e["knots"]) for e in effects],
                        "Reference value": [f"{e['reference']:.4g}" for e in effects],
                        "Non-linearity chi-square": [
                            round(e["nonlinearity"]["statistic"], 3) for e in effects
                        ],
                        "Degrees of freedom": [e["nonlinearity"]["df"] for e in effects],
                        "Non-linearity p": [
                            ui.fmt_p(e["nonlinearity"]["p_value"]) for e in effects
                        ],
                        "Whole effect p": [ui.fmt_p(e["association"]["p_value"]) for e in effects],
                    }
                )
                exact = pd.DataFrame(
                    [
                        {
                            "variable": e["variable"],
                            "knots": " ".join(repr(k) for k in e["knots"]),
                            "reference": e["reference"],
                            **{f"nonlinearity_{k}": v for k, v in e["nonlinearity"].items()},
                            **{f"association_{k}": v for k, v in e["association"].items()},
                        }
                        for e in effects
                    ]
                )
                ui.table(exact, "spline-tests", "effects_spline_tests", shown=tests)
                names = [e["variable"] for e in effects]
                ui.remember_choice("effects_spline_show", names, names[0])
                cols = st.columns([2, 1, 1])
                shown = cols[0].selectbox("Figure of", names, key="effects_spline_show")
                ui.remember("effects_spline_band", True)
                ui.remember("effects_spline_log", True)
                band = cols[1].toggle("Interval band", key="effects_spline_band")
                log_scale = cols[2].toggle("Log scale", key="effects_spline_log")
                effect = effects[names.index(shown)]
                fstyle = ui.titled_style(
                    style,
                    "effects_spline_plot",
                    f"Hazard ratio by {shown}, against {effect['reference']:.4g}",
                    str(shown),
                    "Hazard ratio" + (" (log scale)" if log_scale else ""),
                )
                chart = charts_models.spline_chart(
                    pd.DataFrame(effect["curve"]),
                    fstyle,
                    knots=effect["knots"],
                    reference=effect["reference"],
                    band=band,
                    log_scale=log_scale,
                )
                ui.figure(chart, fstyle, "spline-curve", "effects_spline_figure")
                test = effect["nonlinearity"]
                if test["p_value"] is not None and test["p_value"] < 0.05:
                    reading = (
                        f"the effect of {ui.escape(shown)} bends: it is not a straight line on "
                        f"the log-hazard scale (χ² = {test['statistic']:.2f} on {test['df']} df, "
                        f"p {ui.fmt_p(test['p_value'])}). Report the curve, not one hazard ratio."
                    )
                else:
                    reading = (
                        f"no clear evidence that the effect of {ui.escape(shown)} bends "
                        f"(χ² = {test['statistic']:.2f} on {test['df']} df, p = "
                        f"{ui.fmt_p(test['p_value'])}); the usual straight-line term may do."
                    )
                st.markdown("**Reading:** " + reading)
                st.caption(
                    "The curve is the hazard ratio against the reference value (the median), "
                    "the other covariates held fixed, from the 1st to the 99th percentile; the "
                    "marks along the bottom are the knots. " + ui.NOT_SIGNIFICANT_CAUTION
                )

# --- split at times ---------------------------------------------------------------------------

with tabs[1]:
    st.markdown(
        "When the proportional-hazards check fails for a covariate, its effect may differ early "
        "and late in follow-up. Splitting follow-up at chosen times gives the covariate one "
        "hazard ratio per period; the check is then repeated on the refitted model."
    )
    if not model:
        st.info("Choose covariates on the Column roles and Regression pages to fit a model.")
    else:
        events = frame.loc[frame["_event"] == 1, "_time"]
        start = f"{float(events.median()):.3g}" if len(events) else ""
        cols = st.columns([2, 3, 2])
        ui.remember(keys.SPLIT_TIMES, start)
        cols[0].text_input(
            f"Split follow-up at ({unit})",
            key=keys.SPLIT_TIMES,
            help="One or more times, separated by commas.",
        )
        ui.remember_choices(keys.SPLIT_CHANGING, model, [])
        cols[1].multiselect(
            "Effects allowed to change",
            model,
            key=keys.SPLIT_CHANGING,
            help="Usually the covariates whose proportional-hazards check fails. With none, "
            "the refitted model is the same model.",
        )
        ui.remember(keys.SPLIT_INCLUDE, True)
        cols[2].toggle("In the report and recipe", key=keys.SPLIT_INCLUDE)
        split = keys.split_settings(st.session_state)
        if split is None:
            st.info("Type one or more positive times to split follow-up at.")
        else:
            with ui.guard("The refitted model"):
                split_cox = {**cox, "split": split}
                result = compute_effects.computed_or_raise(
                    compute_effects.time_split(
                        table.sha256, roles_text, json.dumps(split_cox, sort_keys=True), table
                    )
                )
                refit = result["model"]
                cols = st.columns(4)
                cols[0].metric("Periods", len(result["periods"]))
                cols[1].metric("Episodes after the split", f"{result['episodes']:,}")
                cols[2].metric("Events", f"{refit['events']:,}")
                cols[3].metric(
                    "Standard errors",
                    "robust" if refit["variance"] == "robust" else "model-based",
                )
                terms = pd.DataFrame(refit["terms"])
                label = [
                    term_label(t["variable"], t["level"], t.get("reference"))
                    for t in refit["terms"]
                ]
                shown = pd.DataFrame(
                    {
                        "Term": label,
                        "Hazard ratio": terms["hazard_ratio"].map(_ratio_text),
                        f"{format_confidence(cox.get('confidence', 0.95))} CI": [
                            f"{_ratio_text(lo)} to {_ratio_text(hi)}"
                            for lo, hi in zip(terms["lower"], terms["upper"], strict=True)
                        ],
                        "p-value": terms["p_value"].map(ui.fmt_p),
                    }
                )
                ui.table(terms, "split-model-terms", "effects_split_terms", shown=shown)
                rows = terms.assign(
                    label=label,
                    is_reference=False,
                    p_text=terms["p_value"].map(ui.fmt_p),
                ).dropna(subset=["hazard_ratio", "lower", "upper"])
                cuts = ", ".join(f"{t:g}" for t in split["times"])
                fstyle = ui.titled_style(
                    style,
                    "effects_split_plot",
                    f"Hazard ratios with follow-up split at {cuts} {unit}",
                    "Hazard ratio (log scale)",
                    "",
                )
                chart = charts_models.forest_chart(rows, fstyle)
                ui.figure(chart, fstyle, "split-forest", "effects_split_figure")
                st.markdown("**Proportional-hazards check after the split**")
                check = refit["ph_check"]
                check_rows = [*check["terms"], {**check["all_terms"], "variable": ALL_TERMS}]
                ui.table(
                    pd.DataFrame(check_rows),
                    "split-ph-check",
                    "effects_split_ph",
                    shown=_tests_frame(check_rows, "Variable"),
                )
                st.caption(
                    "A small p-value suggests a hazard ratio still changes within the periods; "
                    f"“{ALL_TERMS}” tests every term at once."
                )

# --- subgroups --------------------------------------------------------------------------------

with tabs[2]:
    st.markdown(
        "With a two-level group as the treatment: its hazard ratio within each level of other "
        "columns, and for each column the interaction test of whether the effect differs."
    )
    levels = list(frame["_group"].dropna().unique()) if "_group" in frame.columns else []
    if len(levels) != 2:
        st.info(
            "Subgroup effects need a group column with exactly two levels (the treatment); set "
            "it on the Column roles page."
        )
    else:
        taken = {roles.time, roles.start, roles.end, roles.event, roles.group, roles.entry}
        taken |= {roles.id}
        options = [str(c) for c in table.frame.columns if str(c) not in taken]
        first_two = [c for c in model if c in options][:2]
        ui.remember_choices(keys.SUBGROUP_VARIABLES, options, first_two)
        cols = st.columns([3, 1, 2])
        chosen = cols[0].multiselect("Subgroup columns", options, key=keys.SUBGROUP_VARIABLES)
        ui.remember(keys.SUBGROUP_GROUPS, 2)
        cols[1].selectbox(
            "Groups for a number",
            keys.GROUP_CHOICES,
            key=keys.SUBGROUP_GROUPS,
            help="A numeric column with more than five values is cut at its quantiles into "
            "this many groups of about equal size.",
        )
        ui.remember(keys.SUBGROUPS_INCLUDE, True)
        cols[2].toggle("In the report and recipe", key=keys.SUBGROUPS_INCLUDE)
        st.warning(CAUTION, icon=":material/warning:")
        if chosen:
            with ui.guard("The subgroup effects"):
                request = {
                    "cox": cox,
                    "subgroups": {
                        "variables": list(chosen),
                        "groups": int(st.session_state[keys.SUBGROUP_GROUPS]),
                    },
                }
                result = compute_effects.computed_or_raise(
                    compute_effects.subgroups(
                        table.sha256, roles_text, json.dumps(request, sort_keys=True), table
                    )
                )
                rows = [result["overall"], *result["rows"]]
                names = [
                    "All subjects" if r["variable"] is None else f"{r['variable']}: {r['level']}"
                    for r in rows
                ]
                records = pd.DataFrame(rows)
                shown = pd.DataFrame(
                    {
                        "Subgroup": names,
                        "Subjects": records["n"],
                        "Events": records["events"],
                        "Hazard ratio": records["hazard_ratio"].map(_ratio_text),
                        f"{format_confidence(cox.get('confidence', 0.95))} CI": [
                            f"{_ratio_text(lo)} to {_ratio_text(hi)}"
                            for lo, hi in zip(records["lower"], records["upper"], strict=True)
                        ],
                        "p-value": records["p_value"].map(ui.fmt_p),
                        "Note": records["note"].fillna(""),
                    }
                )
                st.markdown(f"**{ui.escape(result['treatment'])}**")
                ui.table(records, "subgroup-effects", "effects_subgroup_rows", shown=shown)
                drawn = records.assign(
                    label=[
                        f"{name} (n {n:,}, {e:,} events)"
                        for name, n, e in zip(names, records["n"], records["events"], strict=True)
                    ],
                    is_reference=False,
                    p_text=records["p_value"].map(ui.fmt_p),
                ).dropna(subset=["hazard_ratio", "lower", "upper"])
                fstyle = ui.titled_style(
                    style,
                    "effects_subgroup_plot",
                    f"{result['treatment']}, by subgroup",
                    "Hazard ratio (log scale)",
                    "",
                )
                chart = charts_models.forest_chart(drawn, fstyle)
                ui.figure(chart, fstyle, "subgroup-forest", "effects_subgroup_figure")
                st.markdown("**Interaction tests (does the effect differ between levels?)**")
                ui.table(
                    pd.DataFrame(result["interactions"]),
                    "subgroup-interactions",
                    "effects_subgroup_interactions",
                    shown=_tests_frame(result["interactions"], "Column"),
                )
                st.caption(ui.NOT_SIGNIFICANT_CAUTION)
