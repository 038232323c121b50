"""Regression: a Cox model built from the covariates, with its warnings up front, hazard ratios,
tests, proportional-hazards and functional-form checks, and predicted curves."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import big_views, bigdata, charts, charts_models, compute, data, state, thinning, ui
from app.share_section import NO_MODEL_STRATA, PH_LABELS, REFERENCE_PREFIX, VARIANCE_LABELS
from engine.cox.diagnostics import TIME_SCALE_WORDS
from engine.errors import HazelError
from engine.wording import (
    format_confidence,
    format_interval,
    format_number,
    format_p,
    format_ratio,
    p_clause,
    term_label,
)

TIES = {"Efron (default)": "efron", "Breslow": "breslow"}
VARIANCES = {label: value for value, label in VARIANCE_LABELS.items()}
PH_TIME_SCALES = {label: scale for scale, label in PH_LABELS.items()}
PH_SCALE_AXIS = {
    "survival": "1 − Kaplan–Meier survival",
    "rank": "rank of the event time",
    "time": "time as recorded",
    "log-time": "log time",
}
NO_STRATA = NO_MODEL_STRATA  # labels and keys the recipe (app.share_section) reads back
EACH_LEVEL, MY_PROFILES = "Each level of one covariate", "Profiles I set"
CUSTOM_PROFILES = state.MODEL_PROFILES
DOT_LIMIT = 4000  # dots drawn in a residual plot; beyond this a seeded sample is drawn

st.title("Regression", anchor=False)
st.caption("Cox proportional-hazards model: how each covariate goes with the hazard of the event.")
if bigdata.in_use(st.session_state):  # big data: results from aggregates
    big_views.regression_page()
    st.stop()
table, roles = ui.table_and_roles_or_stop()
prepared = ui.prepared_or_stop(table, roles, "a model can be fitted")
if not roles.covariates:
    st.info("No covariates are chosen. Pick them on the Column roles page.")
    st.page_link("views/column_roles.py", label="Column roles", icon=":material/view_column:")
    st.stop()

frame = prepared.frame
kinds = prepared.report.covariate_kinds
is_categorical = {
    c: isinstance(frame[c].dtype, pd.CategoricalDtype) for c in roles.covariates if c in frame
}

# --- model builder --------------------------------------------------------------------------

with st.container(border=True):
    st.subheader("Model", anchor=False)
    ui.remember("model_covariates", list(roles.covariates))
    st.session_state["model_covariates"] = [
        c for c in st.session_state["model_covariates"] if c in roles.covariates
    ]
    covariates = st.multiselect(
        "Covariates in the model",
        list(roles.covariates),
        key="model_covariates",
        help="Add more covariates, or change a covariate's type, on the Column roles page.",
    )
    categorical = [c for c in covariates if is_categorical.get(c)]
    reference: list[tuple[str, str]] = []
    if categorical:
        cols = st.columns(min(len(categorical), 4))
        for i, column in enumerate(categorical):
            levels = [str(x) for x in frame[column].cat.categories]
            ui.remember_choice(REFERENCE_PREFIX + column, levels, levels[0])
            choice = cols[i % len(cols)].selectbox(
                f"Reference level of {ui.escape(column)}",
                levels,
                key=REFERENCE_PREFIX + column,
                help="Hazard ratios of the other levels are relative to this one.",
            )
            reference.append((column, choice))
    cols = st.columns(2)
    strata_options = [NO_STRATA] + [
        str(c)
        for c in table.frame.columns
        if table.frame[c].nunique() <= 20 and str(c) not in (roles.time, roles.event, *covariates)
    ]
    default_strata = roles.strata if roles.strata in strata_options else NO_STRATA
    ui.remember_choice("model_strata", strata_options, default_strata)
    strata = cols[0].selectbox(
        "Strata (own baseline hazard per stratum)",
        strata_options,
        key="model_strata",
    )
    ties = TIES[
        cols[1].radio(
            "Tied event times",
            list(TIES),
            key="model_ties",
            horizontal=True,
            help="Efron's method is more accurate when many events share a time.",
        )
    ]
    variance = VARIANCES[
        st.radio(
            "Standard errors",
            list(VARIANCES),
            key="model_variance",
            horizontal=True,
            help="Several rows per subject (episodes, recurrent events) are not independent: "
            "robust (sandwich) standard errors, summed within each id, allow for that. "
            "Automatic uses them whenever an id repeats.",
        )
    ]

if not covariates:
    st.info("Choose at least one covariate to fit a model.")
    st.stop()

model_key = (
    table.sha256,
    data.roles_key(data.model_roles(roles)),
    tuple(covariates),
    tuple(reference),
    None if strata == NO_STRATA else strata,
    ties,
    variance,
)
try:
    result = compute.cox_model(*model_key, table)
except HazelError as error:
    st.error(
        f"**This model cannot be fitted.** {ui.escape(error)} Try fewer covariates, merge rare "
        "levels, or pick another reference level.",
        icon=":material/error:",
    )
    st.stop()

# --- warnings, prominently ------------------------------------------------------------------

for warning in result.warnings:
    st.warning(ui.escape(warning), icon=":material/warning:")
if result.dropped:
    dropped = ", ".join(f"{ui.escape(k)}: {v:,}" for k, v in result.dropped.items())
    st.info(
        f"Complete-case analysis: {result.n:,} rows used; rows left out because a model "
        f"variable was missing — {dropped}.",
        icon=":material/info:",
    )

cols = st.columns(4)
cols[0].metric("Rows used", f"{result.n:,}")
cols[1].metric("Events", f"{result.events:,}")
cols[2].metric(
    "Concordance (C)",
    format_number(result.concordance.concordance, 3),
    help=f"Standard error {format_number(result.concordance.standard_error, 3)}. 0.5 = no "
    "better than chance at ordering who has the event first; 1 = perfect.",
)
cols[3].metric("Likelihood-ratio test", p_clause(result.likelihood_ratio.p_value))
st.caption(
    f"AIC {result.aic:,.1f} (Akaike's information criterion: lower is better when comparing "
    "models fitted to the same rows)."
)
from app import share_section  # noqa: E402  (text for a manuscript)

share_section.manuscript_box(share_section.cox_text(result), "hazard ratios")


def profile_builder(result, covariates: list[str]) -> tuple:
    """A small form to add covariate profiles; they are kept for this model's covariates."""
    from engine.cox.summaries import typical_profile

    key = "|".join(covariates)
    store = st.session_state.setdefault(CUSTOM_PROFILES, {})
    kept = store.setdefault(key, [])
    typical = typical_profile(result)
    with st.form("model_profile_form", clear_on_submit=False):
        st.markdown("**Add a profile** (starts at the reference levels and the means)")
        cols = st.columns(min(len(covariates), 3))
        values = {}
        for i, column in enumerate(covariates):
            box = cols[i % len(cols)]
            if is_categorical.get(column):
                levels = [str(x) for x in frame[column].cat.categories]
                start = str(typical.get(column, levels[0]))
                values[column] = box.selectbox(
                    ui.escape(column), levels, index=levels.index(start) if start in levels else 0
                )
            else:
                values[column] = box.number_input(
                    ui.escape(column), value=float(typical.get(column, 0.0)), format="%.4g"
                )
        label = st.text_input("Name of the profile", value=f"Profile {len(kept) + 1}")
        if st.form_submit_button("Add profile"):
            name = label.strip() or f"Profile {len(kept) + 1}"
            taken = {n for n, _ in kept}
            while name in taken:
                name += " (again)"
            kept.append((name, tuple(values.items())))
    if kept and st.button("Remove all profiles", key="model_profiles_clear_button"):
        store[key] = []
        st.rerun()
    return tuple(kept)


style = ui.chart_style()
tabs = st.tabs(
    [
        "Hazard ratios",
        "Model tests",
        "Univariable screen",
        "Proportional hazards",
        "Functional form",
        "Predicted curves",
    ]
)

with tabs[0], ui.guard("The hazard-ratio table"):
    terms = result.to_frame()
    ci = f"{format_confidence(result.confidence)} CI"
    shown = big_views.hazard_ratio_frame(result)
    if result.variance == "robust":
        shown["SE (model-based)"] = terms["se_model"].round(4)
        st.caption(
            f"Standard errors, intervals and p-values are robust, clustered by "
            f"{ui.escape(roles.id or 'row')} ({result.clusters:,} clusters): the rows of one "
            "subject are not independent. The model-based SE is shown beside them."
        )
    ui.table(terms, "cox-hazard-ratios", "model_terms", shown=shown)
    if result.variable_wald:
        st.markdown("**Joint tests for categorical covariates with several levels (Wald)**")
        joint = pd.DataFrame([t.to_dict() for t in result.variable_wald])
        ui.table(joint, "cox-joint-wald", "model_joint", shown=ui.test_table(joint, "Covariate"))
    rows = compute.forest(model_key, table)
    rows = charts_models.forest_labels(rows, ui.fmt_p)
    title, x_title, _ = ui.label_inputs(
        "model_forest", "Hazard ratios", f"Hazard ratio with {ci} (log scale)", ""
    )
    fstyle = style.titled(title, x_title, "")
    ui.figure(
        charts_models.forest_chart(rows, fstyle, confidence=result.confidence),
        fstyle,
        "forest-plot",
        "model_forest_figure",
    )
    st.caption(
        f"Squares: hazard ratios; lines: their {ci}s (log scale). A hazard ratio above 1 means a "
        "higher hazard (the event tends to come sooner); below 1, a lower hazard. Each holds "
        "the other covariates fixed."
    )

with tabs[1], ui.guard("The model tests"):
    whole = pd.DataFrame(
        [
            {**result.likelihood_ratio.to_dict(), "variable": "Likelihood ratio"},
            {**result.wald.to_dict(), "variable": "Wald"},
            {**result.score.to_dict(), "variable": "Score"},
        ]
    )
    st.markdown("**Does the model as a whole explain anything?**")
    ui.table(whole, "cox-whole-model-tests", "model_whole", shown=ui.test_table(whole, "Test"))
    lr = result.likelihood_ratio
    figures = (
        f"likelihood ratio χ² = {format_number(lr.statistic, 2)} on {lr.df} degrees of freedom, "
        f"{p_clause(lr.p_value)}"
    )
    st.markdown(
        "**Reading:** "
        + (
            f"the covariates together go with the hazard ({figures})."
            if lr.p_value < 0.05
            else f"no clear evidence that the covariates together go with the hazard ({figures})."
        )
    )
    st.caption(ui.NOT_SIGNIFICANT_CAUTION.replace("the groups are the same", "there is no effect"))
    st.markdown(
        "**What does each covariate add? (the model without it, refitted on the same rows)**"
    )
    without = pd.DataFrame([t.to_dict() for t in result.without_each])
    ui.table(
        without,
        "cox-without-each-tests",
        "model_without_each",
        shown=ui.test_table(without, "Covariate left out"),
    )

with tabs[2], ui.guard("The univariable screen"):
    st.caption(
        "Each covariate alone, on the same rows as the full model, beside its hazard ratio in "
        "the full model. A big change between the two suggests the covariates overlap."
    )
    screen = compute.univariable(model_key, table)
    shown = pd.DataFrame(
        {
            "Covariate": [
                term_label(v, None if lv is None or pd.isna(lv) else lv, ref)
                for v, lv, ref in screen[["variable", "level", "reference"]].itertuples(index=False)
            ],
            "Alone: hazard ratio (95% CI)": [
                f"{format_ratio(h)} ({format_interval(lo, hi)})"
                for h, lo, hi in screen[
                    ["univariable_hazard_ratio", "univariable_lower", "univariable_upper"]
                ].itertuples(index=False)
            ],
            "Alone: p": screen["univariable_p_value"].map(format_p),
            "In the model: hazard ratio (95% CI)": [
                f"{format_ratio(h)} ({format_interval(lo, hi)})"
                for h, lo, hi in screen[
                    ["multivariable_hazard_ratio", "multivariable_lower", "multivariable_upper"]
                ].itertuples(index=False)
            ],
            "In the model: p": screen["multivariable_p_value"].map(format_p),
        }
    )
    ui.table(screen, "cox-univariable-screen", "model_screen", shown=shown)

with tabs[3], ui.guard("The proportional-hazards check"):
    time_scale = PH_TIME_SCALES[
        st.selectbox("Time scale for the check", list(PH_TIME_SCALES), key="model_ph_time_scale")
    ]
    test, residuals = compute.ph_check(model_key, time_scale, table)
    ph = test.to_frame()
    checks = pd.DataFrame([t.to_dict() for t in test.checks])
    ui.table(ph, "proportional-hazards-check", "model_ph", shown=ui.test_table(checks, "Covariate"))
    st.caption(
        f"Grambsch–Therneau test of each covariate and of all terms together, on the "
        f"{TIME_SCALE_WORDS[time_scale]}."
    )
    worst = min(test.checks, key=lambda t: t.p_value)
    st.markdown(
        "**Reading:** "
        + (
            f"the hazard ratio of {ui.escape(worst.variable)} seems to change over time "
            f"({p_clause(worst.p_value)}); look at its plot below, and consider strata or a "
            "time-varying effect."
            if worst.p_value < 0.05
            else "no clear sign that any hazard ratio changes over time."
        )
    )
    st.caption(
        "A non-significant check does not prove the hazards are proportional; with many rows, "
        "a significant one may reflect a change too small to matter. The plot shows how big it is."
    )
    term_labels = [t.label for t in result.design.terms]
    ui.remember_choice("model_ph_term", term_labels, term_labels[0])
    term = st.selectbox("Residuals of", term_labels, key="model_ph_term")
    # by position (time on the check's scale, then one column per term in order), so that a
    # covariate named like a column of the residual table ("time") cannot pick the wrong one
    picked = residuals.iloc[:, [3, 4 + term_labels.index(term)]].set_axis(["x", "residual"], axis=1)
    points = compute.sample_rows(picked, DOT_LIMIT)
    coefficient = result.terms[term_labels.index(term)].coef
    rstyle = ui.titled_style(
        style,
        "model_ph_plot",
        f"Scaled Schoenfeld residuals: {term}",
        f"Time scale: {PH_SCALE_AXIS[time_scale]}",
        "β(t) for this term",
    )
    chart = charts_models.residual_chart(
        points, rstyle, x_title=rstyle.x_title, y_title=rstyle.y_title, zero_line=coefficient
    )
    ui.figure(chart, rstyle, "schoenfeld-residuals", "model_ph_figure")
    st.caption(
        "A flat smoother at the dashed line (the model's coefficient) is what proportional "
        "hazards predicts; a trend means the effect changes over time."
        + (
            f" Showing a random {DOT_LIMIT:,} of {len(residuals):,} residuals."
            if len(residuals) > DOT_LIMIT
            else ""
        )
    )

with tabs[4], ui.guard("The functional-form check"):
    numeric = [c for c in covariates if not is_categorical.get(c)]
    if numeric:
        table_m, bins = compute.martingale(model_key, table)
        ui.remember_choice("model_mart_variable", numeric, numeric[0])
        variable = st.selectbox("Numeric covariate", numeric, key="model_mart_variable")
        here = table_m.loc[table_m["variable"] == variable]
        points = compute.sample_rows(here[["value", "residual_null"]], DOT_LIMIT).rename(
            columns={"value": "x", "residual_null": "residual"}
        )
        mstyle = ui.titled_style(
            style,
            "model_mart_plot",
            f"Martingale residuals against {variable}",
            variable,
            "Martingale residual (null model)",
        )
        chart = charts_models.residual_chart(
            points, mstyle, x_title=mstyle.x_title, y_title=mstyle.y_title, zero_line=None
        )
        ui.figure(chart, mstyle, "martingale-residuals", "model_mart_figure")
        st.caption(
            "Residuals of a model without covariates, against the covariate: a straight smoother "
            "supports entering it as a straight line; a bend suggests a transformation or groups."
        )
    categorical_all = [c for c in covariates if is_categorical.get(c)]
    if categorical_all:
        ui.remember_choice("model_lml_variable", categorical_all, categorical_all[0])
        variable = st.selectbox(
            "Categorical covariate (log-minus-log plot)", categorical_all, key="model_lml_variable"
        )
        lines = compute.log_minus_log_lines(
            table.sha256, data.roles_key(data.model_roles(roles)), variable, table
        )
        lines = lines.rename(columns={"level": "group", "log_minus_log": "value"})
        levels = list(dict.fromkeys(lines["group"]))
        lstyle = ui.titled_style(
            style,
            "model_lml_plot",
            f"log(−log survival) by {variable}",
            "log(time)",
            "log(−log survival)",
        )
        chart = charts_models.log_minus_log_chart(
            lines, lstyle, charts.group_colours(levels), legend_title=f"Level of {variable}"
        )
        ui.figure(chart, lstyle, "log-minus-log", "model_lml_figure")
        st.caption(
            "Roughly parallel lines are what proportional hazards predicts for this covariate."
        )
    if not numeric and not categorical_all:
        st.caption("No covariates to check.")

with tabs[5], ui.guard("The predicted curves"):
    mode = st.radio(
        "Curves for",
        [EACH_LEVEL, MY_PROFILES],
        key="model_profile_mode",
        horizontal=True,
        help="A profile is one set of covariate values; its curve is the survival the model "
        "predicts for it (from the Breslow baseline).",
    )
    if mode == EACH_LEVEL:
        ui.remember_choice("model_profile_variable", covariates, covariates[0])
        variable = st.selectbox(
            "Vary",
            covariates,
            key="model_profile_variable",
            help="One curve per level (or per quartile of a number); the other covariates at "
            "their reference level or mean.",
        )
        curves, profiles = compute.predicted(model_key, variable, table)
        default_title = f"Predicted survival by {variable}"
    else:
        chosen_profiles = profile_builder(result, covariates)
        curves = profiles = None
        if chosen_profiles:
            curves, profiles = compute.predicted_profiles(model_key, chosen_profiles, table)
        else:
            st.info("Add a profile above to draw its predicted curve.")
        default_title = "Predicted survival for chosen profiles"
    if curves is not None:
        if curves["stratum"].notna().any():
            curves = curves.assign(
                profile=curves["profile"] + " · " + curves["stratum"].astype(str)
            )
        rows = pd.DataFrame(
            {"group": curves["profile"], "time": curves["time"], "estimate": curves["survival"]}
        )
        pstyle = ui.titled_style(
            style,
            "model_pred_plot",
            default_title,
            f"Time ({prepared.report.time_unit})",
            "Predicted survival",
        )
        drawn = thinning.thin_step_frame(
            rows, ["estimate"], (0.0, 1.0), pstyle.height, group="group"
        )
        levels = list(dict.fromkeys(drawn["group"]))
        chart = charts.step_curve_chart(
            drawn,
            pstyle,
            charts.group_colours(levels),
            band=False,
            ticks=charts.nice_ticks(float(drawn["time"].max())),
            legend_title="Profile",
        )
        ui.figure(chart, pstyle, "predicted-survival", "model_pred_figure")
        st.markdown("**Profiles**")
        ui.table(profiles, "predicted-profiles", "model_profiles")
        with st.expander("Predicted values (every time)"):
            ui.table(curves, "predicted-survival", "model_pred_values")
