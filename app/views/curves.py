"""Curves: Kaplan–Meier (or cumulative incidence, or cumulative hazard) overall or by group,
with numbers at risk under the plot and a summary table."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import big_views, bigdata, charts, compute, data, ui
from app.share_section import RMST_ORIGIN_LABELS
from engine.prepare.roles import TIME_UNITS, event_in_words
from engine.wording import (
    format_confidence,
    format_number,
    format_plain,
    free_name,
    median_name,
    probability_title,
    rmst_name,
)

SCALES = {
    "Probability still free of the event": compute.SURVIVAL,
    "Cumulative incidence (1 − survival)": compute.INCIDENCE,
    "Cumulative hazard (Nelson–Aalen)": compute.HAZARD,
}
TRANSFORMS = {"log-log (default)": "log-log", "log": "log", "linear": "linear"}
CONFIDENCE = {"95%": 0.95, "90%": 0.90, "99%": 0.99, "80%": 0.80}

st.title("Curves", anchor=False)
if bigdata.in_use(st.session_state):  # big data: results from aggregates
    big_views.curves_page()
    st.stop()
table, roles = ui.table_and_roles_or_stop()
base = ui.prepared_or_stop(table, roles, "curves can be drawn")

has_group = roles.group is not None and "_group" in base.frame.columns
row = st.columns([2, 3, 2, 2])
ui.remember("curves_for", "Each group" if has_group else "All rows")
by_group = (
    row[0].segmented_control(
        "Curves for",
        ["All rows", "Each group"],
        key="curves_for",
        disabled=not has_group,
        help=None if has_group else "Choose a group column on the Column roles page.",
    )
    == "Each group"
    and has_group
)
scale_label = row[1].selectbox("Show", list(SCALES), key="curves_scale")
scale = SCALES[scale_label]
ui.remember("curves_unit", base.report.time_unit)
unit = row[2].selectbox("Time unit", list(TIME_UNITS), key="curves_unit")
ui.remember("curves_xmax", 0.0)
x_limit = row[3].number_input(
    f"Show up to time ({unit})",
    min_value=0.0,
    step=1.0,
    key="curves_xmax",
    help="0 shows the whole follow-up.",
)
toggles = st.columns(4)
for key in ("curves_band", "curves_censor", "curves_risk"):
    ui.remember(key, True)
band = toggles[0].toggle("Interval band", key="curves_band")
censor = toggles[1].toggle("Censoring marks", key="curves_censor")
risk = toggles[2].toggle("Numbers at risk", key="curves_risk")
with st.expander("Estimation settings"):
    cols = st.columns(2)
    confidence = CONFIDENCE[
        cols[0].selectbox("Confidence level", list(CONFIDENCE), key="curves_conf")
    ]
    transform = TRANSFORMS[
        cols[1].selectbox(
            "Interval transform (survival)",
            list(TRANSFORMS),
            key="curves_transform",
            help="log-log keeps the interval inside 0 to 1 and behaves well in small samples.",
        )
    ]

event = event_in_words(roles)
shown_roles = data.curve_roles(roles)
if unit != base.report.time_unit:
    shown_roles = data.with_unit(shown_roles, unit)
roles_text = data.roles_key(shown_roles)
style = ui.chart_style()
group_label = roles.group if by_group else None
default_title = {
    compute.SURVIVAL: free_name(event).capitalize(),
    compute.INCIDENCE: f"Cumulative incidence of {event}",
    compute.HAZARD: f"Cumulative hazard of {event}",
}[scale] + (f" by {group_label}" if group_label else ", all rows")
y_default = {
    compute.SURVIVAL: probability_title(event),
    compute.INCIDENCE: f"Probability of {event} by then",
    compute.HAZARD: "Cumulative hazard (Nelson–Aalen)",
}[scale]
style = ui.titled_style(style, "curves", default_title, f"Time ({unit})", y_default)

with ui.guard("The curves"):
    drawing = compute.curve_drawing(
        table.sha256,
        roles_text,
        scale,
        confidence,
        transform,
        by_group,
        (style.width, style.height),
        x_limit or None,
        table,
    )
    levels = list(base.frame["_group"].cat.categories) if has_group else []
    colours = charts.group_colours(levels)
    ticks = charts.nice_ticks(drawing["x_upper"])
    chart = charts.step_curve_chart(
        drawing["curves"],
        style,
        colours,
        censored=drawing["censored"] if censor else None,
        band=band,
        y_domain=drawing["y_domain"],
        x_max=drawing["x_upper"],
        ticks=ticks,
        y_format=".2f" if scale != compute.HAZARD else ".2~f",
        legend_title=charts.group_title(group_label) if group_label else None,
        align_with_table=risk,
    )
    risk_chart = None
    if risk:
        numbers = compute.at_risk_table(table.sha256, roles_text, tuple(ticks), by_group, table)
        risk_chart = charts.at_risk_chart(
            numbers.rename(columns={"tick": "time"}),
            style,
            colours,
            x_max=drawing["x_upper"],
            ticks=ticks,
        )
    ui.figure(
        charts.curve_with_risk_table(chart, risk_chart, style), style, "curves", "curves_figure"
    )
    if drawing["vertices"] > len(drawing["curves"]):
        st.caption(
            f"Drawn with {len(drawing['curves']):,} of {drawing['vertices']:,} step vertices: "
            "the others would move the line by less than a pixel. Downloads below keep every "
            "vertex."
        )
    with st.expander("Every vertex of the curves (exact values)"):
        if st.toggle("Show the table", key="curves_show_vertices"):
            full = compute.full_curve_table(
                table.sha256, roles_text, scale, confidence, transform, table
            )
            ui.table(full, f"{scale}-curve-values", "curves_vertices")

# --- summary --------------------------------------------------------------------------------

st.subheader("Summary", anchor=False)
cols = st.columns(2)
with ui.guard("Suggested times"):
    # Two round times within follow-up as a start; the user can type any others.
    span = float(base.frame["_time"].max()) if len(base.frame) else 0.0
    first_ticks = charts.nice_ticks(span, count=4)[1:3]
    ui.remember("curves_times", ", ".join(f"{t:g}" for t in first_ticks))
times_text = cols[0].text_input(
    f"Estimates at times ({unit}), separated by commas",
    key="curves_times",
    placeholder="e.g. 12, 24, 36",
)
ui.remember("curves_tau", 0.0)
tau_value = cols[1].number_input(
    f"Restricted mean up to ({unit}), 0 = automatic",
    min_value=0.0,
    key="curves_tau",
    help="Restricted mean survival time: the average time free of the event up to this time. "
    "Automatic: the smallest of the groups' largest observed times.",
)
rmst_origin = "zero"
if roles.entry:  # with delayed entry the area may start at 0 or at the first entry
    ui.remember("curves_rmst_origin", RMST_ORIGIN_LABELS["zero"])
    chosen_origin = cols[1].radio(
        "Restricted mean from",
        list(RMST_ORIGIN_LABELS.values()),
        key="curves_rmst_origin",
        help="With delayed entry nobody is followed before the first entry. From time 0 the "
        "curve counts as 1 there; from the first entry the area starts where follow-up does.",
    )
    rmst_origin = {v: k for k, v in RMST_ORIGIN_LABELS.items()}[chosen_origin]


def parse_times(text: str) -> tuple[float, ...]:
    parts = [p for p in text.replace(";", ",").split(",") if p.strip()]
    return tuple(sorted({float(p) for p in parts}))


def _value(value, fmt: str) -> str | None:
    return None if value is None or pd.isna(value) else format(value, fmt)


def interval(estimate, lower, upper, fmt: str = ".3g", missing: str = "not reached") -> str:
    """'estimate (lower to upper)'; a missing limit is shown as 'not reached'."""
    shown = _value(estimate, fmt)
    if shown is None:
        return missing
    lo, hi = _value(lower, fmt), _value(upper, fmt)
    if lo is None and hi is None:
        return shown
    return f"{shown} ({lo or 'not reached'} to {hi or 'not reached'})"


try:
    times = parse_times(times_text)
except ValueError:
    st.error("Times must be numbers separated by commas, for example 12, 24, 36.")
    times = ()

with ui.guard("The summary table"):
    summary = compute.summary_table(
        table.sha256,
        roles_text,
        times,
        tau_value or None,
        confidence,
        transform,
        table,
        rmst_origin,
    )
    frame = summary.to_frame()
    frame["group"] = frame["group"].map(compute.label_text)
    shown = pd.DataFrame(
        {
            "Group": frame["group"],
            "Subjects": frame["n"],
            "Events": frame["events"],
            "Censored": frame["censored"],
            f"{median_name(event).capitalize()} ({unit})": [
                interval(e, lo, hi)
                for e, lo, hi in frame[["median", "median_lower", "median_upper"]].itertuples(
                    index=False
                )
            ],
        }
    )
    for t in summary.times:
        key = f"survival_{t:g}"
        shown[f"{free_name(event).capitalize()} at {format_plain(t)} {unit}"] = [
            interval(e, lo, hi, ".3f", "not estimable")
            for e, lo, hi in frame[[key, f"{key}_lower", f"{key}_upper"]].itertuples(index=False)
        ]
    horizon = f"{format_number(summary.tau, 1)} {unit}"
    start = f"from {format_number(summary.rmst_origin, 1)} " if summary.rmst_origin else ""
    shown[f"{rmst_name(event).capitalize()} {start}to {horizon} ({unit})"] = [
        interval(e, lo, hi)
        for e, lo, hi in frame[["rmst", "rmst_lower", "rmst_upper"]].itertuples(index=False)
    ]
    ui.table(frame, "curve-summary", "curves_summary", shown=shown)
    st.caption(
        f"Each cell: estimate ({format_confidence(confidence)} confidence interval, "
        f"{summary.transform} scale). {summary.quantile_method} The restricted mean runs to "
        f"{horizon}: {summary.tau_rule}."
        + (f" {summary.rmst_origin_rule}" if summary.rmst_origin_rule else "")
    )

# --- text for a manuscript (app.share_section) -----------------------------------------------

with ui.guard("The manuscript text"):
    from app import share_section

    share_section.manuscript_box(
        # the rows and unit the summary above uses (the unit switch converts the times)
        share_section.curve_text(
            data.prepared(table, shown_roles).frame, times, confidence, transform, unit, event
        ),
        "medians and survival at the chosen times",
    )
