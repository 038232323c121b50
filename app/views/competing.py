"""Competing risks: name the causes behind the event column's values, then cumulative incidence
per cause (Aalen–Johansen) by group with bands, the 1 − KM comparison, cause-specific Cox
models, Gray's test per cause and the Fine–Gray model of a chosen cause with its predicted
cumulative incidence."""

from __future__ import annotations

from dataclasses import replace

import pandas as pd
import streamlit as st

from app import charts, charts_models, compute_beyond, data, share_section, ui
from app.share_section import NO_FINE_GRAY
from engine.wording import format_interval, format_p, format_percent, format_ratio, term_label

CONFIDENCE = {"95%": 0.95, "90%": 0.90, "99%": 0.99}

st.title("Competing risks", anchor=False)
st.caption(
    "When a subject can have one of several kinds of event (died, sold, moved away), each one "
    "stops the others from happening. Name the kinds here; Hazel then estimates the "
    "probability of each by every time."
)
table, roles = ui.table_and_roles_or_stop()
if roles.event is None:
    st.info("Choose the event column on the Column roles page first.")
    st.page_link("views/column_roles.py", label="Column roles", icon=":material/view_column:")
    st.stop()

# --- causes ---------------------------------------------------------------------------------

counts = table.frame[roles.event].value_counts(dropna=True)
values = list(counts.index)
if len(values) > 20:
    st.warning(
        f"The event column {ui.escape(roles.event)} has {len(values)} distinct values; causes "
        "are named for columns with at most 20. Choose another event column."
    )
    st.stop()
named = {str(v): name for v, name in roles.event_causes}
event_values = {str(v) for v in roles.event_values}
with st.container(border=True):
    st.subheader("Causes", anchor=False)
    st.caption(
        f"One row per value of {ui.escape(roles.event)}. Give each kind of event a name; leave "
        "the box empty for values that mean censored (still event-free when last seen). The "
        "first cause named is the event of interest for the other pages."
    )
    pairs = []
    for i, value in enumerate(values):
        key = f"cr_cause_{i}"
        ui.remember(key, named.get(str(value), str(value) if str(value) in event_values else ""))
        cols = st.columns([2, 1, 3])
        cols[0].markdown(f"**{ui.escape(value)}**")
        cols[1].caption(f"{int(counts[value]):,} rows")
        name = cols[2].text_input(
            f"Cause for {value}", key=key, label_visibility="collapsed", placeholder="censored"
        )
        if name.strip():
            pairs.append((value, name.strip()))
# the event of interest (the values of the event role) leads
pairs.sort(key=lambda pair: str(pair[0]) not in event_values)
causes = tuple(pairs)
if causes != tuple(roles.event_causes):
    data.set_roles(st.session_state, replace(roles, event_causes=causes))
    st.rerun()
if not causes:
    st.info("Name at least one cause above (the event of interest).")
    st.stop()
prepared = ui.prepared_or_stop(table, roles, "cumulative incidence can be estimated")
if len({name for _, name in causes}) == 1:
    st.info(
        "Only one kind of event is named, so the cumulative incidence equals 1 − Kaplan–Meier. "
        "If some of the values above are another kind of event (not censoring), give them a "
        "name of their own; the Dairy herd demo has two kinds.",
        icon=":material/info:",
    )
if "_cause" not in prepared.frame.columns:
    st.info("Name the causes above to estimate their cumulative incidence.")
    st.stop()

# --- settings -------------------------------------------------------------------------------

has_group = "_group" in prepared.frame.columns
roles_text = data.roles_key(data.curve_roles(roles))
unit = prepared.report.time_unit


@st.fragment
def incidence_block(table, roles, roles_text: str, unit: str, has_group: bool) -> None:
    """The settings, figure and tables of the cumulative incidence; a fragment, so a display
    switch (1 − KM, each group, the confidence level) reruns only this part of the page."""
    cols = st.columns(4)
    ui.remember("cr_by_group", has_group)
    by_group = cols[0].toggle("Each group", key="cr_by_group", disabled=not has_group) and has_group
    ui.remember("cr_show_km", True)
    show_km = cols[1].toggle(
        "Show 1 − KM",
        key="cr_show_km",
        help="One minus the Kaplan–Meier curve that treats the other causes as censored, dotted.",
    )
    confidence = CONFIDENCE[cols[2].selectbox("Confidence level", list(CONFIDENCE), key="cr_conf")]
    ui.remember("cr_include", True)
    cols[3].toggle("In the report and recipe", key="cr_include")

    with ui.guard("The cumulative incidence"):
        result = compute_beyond.incidence(table.sha256, roles_text, by_group, confidence, table)
        if result.warning:
            st.warning(result.warning, icon=":material/warning:")
        style = ui.chart_style()
        style = ui.titled_style(
            style,
            "cr_plot",
            "Cumulative incidence by cause" + (f" and {roles.group}" if by_group else ""),
            f"Time ({unit})",
            "Probability of the event by then",
        )
        cif, km = compute_beyond.incidence_drawing(
            table.sha256, roles_text, by_group, confidence, style.height, table
        )
        series = list(dict.fromkeys(cif["group"]))
        top = float(max(cif["upper"].max(), km["estimate"].max() if show_km else 0, 0.05))
        chart = charts.incidence_chart(
            cif,
            style,
            charts.group_colours(series),
            one_minus_km=km if show_km else None,
            y_domain=(0.0, min(1.0, top * 1.05)),
            legend_title=charts.incidence_legend_title(roles.group if by_group else None),
        )
        ui.figure(chart, style, "cumulative-incidence", "cr_figure")
        st.caption(
            f"Solid: Aalen–Johansen estimate with pointwise {format_percent(confidence, 0)} bands"
            + ("; dotted: 1 − Kaplan–Meier with the other causes censored." if show_km else ".")
        )

        st.subheader("At the end of follow-up", anchor=False)
        frame = result.to_frame()
        last = frame.groupby(["group", "cause"], sort=False, dropna=False).tail(1)
        shown = pd.DataFrame(
            {
                "Group": last["group"].map(compute_beyond.compute.label_text),
                "Cause": last["cause"],
                f"Time ({unit})": last["time"].map(lambda t: f"{t:,.1f}"),
                "Cumulative incidence": [
                    f"{format_percent(e)} ({format_percent(lo)} to {format_percent(hi)})"
                    for e, lo, hi in last[["cumulative_incidence", "lower", "upper"]].itertuples(
                        index=False
                    )
                ],
                "1 − KM": last["one_minus_km"].map(format_percent),
            }
        )
        ui.table(last, "cumulative-incidence-final", "cr_final", shown=shown)
        with st.expander("Every step of the estimate (exact values)"):
            if st.toggle("Show the table", key="cr_show_steps"):
                ui.table(frame, "cumulative-incidence", "cr_steps")


incidence_block(table, roles, roles_text, unit, has_group)

# --- cause-specific Cox models --------------------------------------------------------------

st.subheader("Cause-specific Cox models", anchor=False)
if not roles.covariates:
    st.info("Choose covariates on the Column roles page to fit a Cox model per cause.")
else:
    st.caption(
        "One model per cause, the other causes counted as censored: each hazard ratio says how "
        "a covariate goes with the rate of that cause among subjects still free of every event."
    )
    with ui.guard("The cause-specific models"):
        models = compute_beyond.cause_specific(
            table.sha256, data.roles_key(roles), "efron", table, roles
        )
        rows = models.to_frame()
        shown = pd.DataFrame(
            {
                "Cause": rows["cause"],
                "Term": [
                    term_label(v, None if pd.isna(lv) else lv, None if pd.isna(lv) else ref)
                    for v, lv, ref in rows[["variable", "level", "reference"]].itertuples(
                        index=False
                    )
                ],
                "Hazard ratio": rows["hazard_ratio"].map(format_ratio),
                "95% CI": [
                    format_interval(lo, hi)  # "not estimable" for a coefficient running off
                    for lo, hi in rows[["lower", "upper"]].itertuples(index=False)
                ],
                "p": rows["p_value"].map(format_p),
            }
        )
        ui.table(rows, "cause-specific-cox", "cr_cox", shown=shown)
        for cause, model in models.models:
            share_section.manuscript_box(share_section.cox_text(model), f"cause {cause}")


def predicted_incidence(table, roles, model_text: str, chosen_cause: str, unit: str) -> None:
    """The predicted-incidence curves of the Fine–Gray model (inside the Fine–Gray fragment, so
    switching the covariate reruns only that block)."""
    st.markdown("**Predicted cumulative incidence**")
    ui.remember_choice("cr_fg_profile", list(roles.covariates), roles.covariates[0])
    variable = st.selectbox(
        "Curves for each level of",
        list(roles.covariates),
        key="cr_fg_profile",
        help="The other covariates are held at their mean (numeric) or reference level.",
    )
    pstyle = ui.titled_style(
        ui.chart_style(),
        "cr_fg_pred",
        f"Predicted cumulative incidence of {chosen_cause}",
        f"Time ({unit})",
        "Probability of the event by then",
    )
    drawn = compute_beyond.fine_gray_drawing(
        table.sha256, model_text, chosen_cause, "efron", variable, pstyle.height,
        table, roles,
    )  # fmt: skip
    levels = list(dict.fromkeys(drawn["group"]))
    top = float(drawn["estimate"].max()) if len(drawn) else 0.0
    chart = charts.step_curve_chart(
        drawn,
        pstyle,
        charts.group_colours(levels),
        band=False,
        y_domain=(0.0, min(1.0, max(top * 1.15, 0.05))),
        ticks=charts.nice_ticks(float(drawn["time"].max())),
        legend_title="Profile",
    )
    ui.figure(chart, pstyle, "fine-gray-incidence", "cr_fg_pred_figure")
    with st.expander("Predicted values (every time)"):
        if st.toggle("Show the table", key="cr_fg_show_values"):
            curves = compute_beyond.fine_gray_profiles(
                table.sha256, model_text, chosen_cause, "efron", variable, table, roles
            )
            ui.table(curves, "fine-gray-incidence", "cr_fg_pred_values")


# --- Gray's test ----------------------------------------------------------------------------

st.subheader("Gray's test: is the cumulative incidence the same in every group?", anchor=False)
if not has_group:
    st.info("Set a group column on the Column roles page to compare the groups' incidence.")
else:
    with ui.guard("Gray's test"):
        tests = compute_beyond.gray_tests(table.sha256, roles_text, table)
        if tests is None:
            st.info("Gray's test needs at least two groups with rows.")
        else:
            shown = pd.DataFrame(
                {
                    "Cause": tests["cause"],
                    "χ² statistic": tests["statistic"].map(lambda v: f"{v:.2f}"),
                    "Degrees of freedom": tests["df"],
                    "p-value": tests["p_value"].map(ui.fmt_p),
                }
            )
            ui.table(tests, "gray-test", "cr_gray", shown=shown)
            st.caption(
                "One test per cause, of equal cumulative incidence of that cause across the "
                f"levels of {ui.escape(roles.group)} (Gray 1988, log-rank weights), the other "
                "causes counted as competing events. " + ui.NOT_SIGNIFICANT_CAUTION
            )


@st.fragment
def fine_gray_block(table, roles, causes, unit: str) -> None:
    """The cause chooser, table, forest figure and predicted incidence of the Fine–Gray model; a
    fragment, so choosing the cause or a profile reruns only this block."""
    cause_names = list(dict.fromkeys(name for _, name in causes))
    options = [NO_FINE_GRAY, *cause_names]
    ui.remember_choice("cr_fine_gray", options, NO_FINE_GRAY)
    cols = st.columns([2, 3])
    chosen_cause = cols[0].selectbox(
        "Cause modelled",
        options,
        key="cr_fine_gray",
        help="The cause whose cumulative incidence the covariates are related to; the other "
        "causes compete. “(none)” leaves the model out of the report and recipe.",
    )
    if chosen_cause == NO_FINE_GRAY:
        cols[1].caption(
            "Choose a cause to relate the covariates to its cumulative incidence, the chance of "
            "having had it by each time when the other causes compete."
        )
    if chosen_cause != NO_FINE_GRAY:
        from engine.competing.fine_gray import MEANING

        with ui.guard("The Fine–Gray model"):
            model_text = data.roles_key(roles)
            fg = compute_beyond.fine_gray(
                table.sha256, model_text, chosen_cause, "efron", table, roles
            )
            for warning in fg.warnings:
                st.warning(ui.escape(warning), icon=":material/warning:")
            if roles.strata:
                st.info(
                    f"The strata role ({ui.escape(roles.strata)}) is not used by the Fine–Gray "
                    "model: it has one baseline for all rows. Add the strata column as a "
                    "covariate to adjust for it.",
                    icon=":material/info:",
                )
            cols = st.columns(4)
            cols[0].metric("Rows used", f"{fg.n:,}")
            cols[1].metric(f"Events of {chosen_cause}", f"{fg.events:,}")
            cols[2].metric("Competing events", f"{fg.competing_events:,}")
            cols[3].metric("Censored", f"{fg.censored:,}")
            st.info(MEANING, icon=":material/lightbulb:")
            rows = fg.to_frame()
            robust = fg.variance == "robust"  # else singular: the warnings say why
            se_header = "Standard error (robust)" if robust else "Standard error (model, used)"
            shown = pd.DataFrame(
                {
                    "Term": [
                        term_label(v, None if lv is None or pd.isna(lv) else lv, ref)
                        for v, lv, ref in rows[["variable", "level", "reference"]].itertuples(
                            index=False
                        )
                    ],
                    "Subdistribution hazard ratio": rows["hazard_ratio"].map(lambda v: f"{v:.3f}"),
                    "95% CI": [
                        f"{lo:.3f} to {hi:.3f}"
                        for lo, hi in rows[["lower", "upper"]].itertuples(index=False)
                    ],
                    "p-value": rows["p_value"].map(ui.fmt_p),
                    se_header: rows["se"].map(lambda v: f"{v:.4f}"),
                    "Standard error (model)": rows["se_model"].map(lambda v: f"{v:.4f}"),
                }
            )
            ui.table(rows, "fine-gray", "cr_fg_table", shown=shown)
            forest = fg.forest()
            forest = forest.assign(
                label=[
                    f"{v}"
                    if lv is None or pd.isna(lv)
                    else f"{v}: {lv}" + (" (reference)" if r else "")
                    for v, lv, r in forest[["variable", "level", "is_reference"]].itertuples(
                        index=False
                    )
                ],
                p_text=forest["p_value"].map(
                    lambda p: ui.fmt_p(p) if p is not None else "reference"
                ),
            )
            fstyle = ui.titled_style(
                ui.chart_style(),
                "cr_fg_forest",
                f"Subdistribution hazard ratios for {chosen_cause}",
                "Subdistribution hazard ratio (log scale)",
                "",
            )
            ui.figure(
                charts_models.forest_chart(forest, fstyle), fstyle, "fine-gray-forest", "cr_fg_fig"
            )

            predicted_incidence(table, roles, model_text, chosen_cause, unit)


# --- Fine–Gray model ------------------------------------------------------------------------

st.subheader("Fine–Gray model: covariates and the incidence of one cause", anchor=False)
if not roles.covariates:
    st.info("Choose covariates on the Column roles page to fit a Fine–Gray model.")
elif "_entry" in prepared.frame.columns:
    st.info(
        "The Fine–Gray model is not available with an entry-time role (delayed entry): its "
        "censoring weights assume everyone is followed from time 0."
    )
else:
    fine_gray_block(table, roles, causes, unit)
