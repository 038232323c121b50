"""Landmark analysis: curves and a group comparison counted from a chosen time, among the
subjects still at risk then, with the number left out shown."""

from __future__ import annotations

import streamlit as st

from app import charts, compute, compute_beyond, data, share_section, ui
from engine.prepare.roles import event_in_words
from engine.survival.compare import TESTS
from engine.wording import comparison_sentence, format_number, format_plain, probability_title

st.title("Landmark analysis", anchor=False)
st.caption(
    "Comparing groups that form during follow-up (responders, transplanted) from time 0 "
    "favours whoever had to survive long enough to join a group. A landmark analysis starts "
    "the clock at a fixed time and keeps only the subjects still at risk then."
)
table, roles = ui.table_and_roles_or_stop()
prepared = ui.prepared_or_stop(table, roles, "a landmark can be set")
unit = prepared.report.time_unit
last_time = float(prepared.frame["_time"].max()) if len(prepared.frame) else 0.0

cols = st.columns([2, 3, 1, 1, 2])
ui.remember("landmark_time", charts.nice_ticks(last_time, count=5)[1] if last_time else 0.0)
at = cols[0].number_input(
    f"Landmark time ({unit})",
    min_value=0.0,
    key="landmark_time",
    help=f"Follow-up runs to {last_time:,.4g} {unit}.",
)
ui.remember("landmark_test", "logrank")
TEST_NAMES = {
    "logrank": "Log-rank",
    "gehan-breslow": "Gehan–Breslow",
    "tarone-ware": "Tarone–Ware",
    "peto-peto": "Peto–Peto",
    "fleming-harrington": "Fleming–Harrington (choose ρ and γ)",
}
test = cols[1].selectbox("Test", TESTS, format_func=TEST_NAMES.get, key="landmark_test")
rho = gamma = 0.0
if test == "fleming-harrington":
    ui.remember("landmark_rho", 0.0)
    ui.remember("landmark_gamma", 1.0)
    rho = cols[2].number_input("ρ (early)", 0.0, 5.0, step=0.5, key="landmark_rho")
    gamma = cols[3].number_input("γ (late)", 0.0, 5.0, step=0.5, key="landmark_gamma")
ui.remember("landmark_include", True)
cols[4].toggle("In the report and recipe", key="landmark_include")
event = event_in_words(roles)
roles_text = data.roles_key(data.curve_roles(roles))

with ui.guard("The landmark selection"):
    selected = compute_beyond.landmark(table.sha256, roles_text, float(at), table)
    cols = st.columns(3)
    cols[0].metric("Subjects kept", f"{selected.n_kept:,}")
    cols[1].metric("Left out", f"{selected.n_excluded:,}")
    cols[2].metric("Time now counted from", f"{format_plain(at)} {unit}")
    counts = selected.to_frame()
    shown = counts.assign(group=counts["group"].map(compute.label_text)).rename(
        columns={
            "group": "Group",
            "n_rows": "Subjects",
            "n_kept": "Kept",
            "n_events_before": "Event before the landmark",
            "n_censored_before": "Censored before the landmark",
            "n_entered_after": "Entered after the landmark",
        }
    )
    ui.table(counts, "landmark-counts", "landmark_counts", shown=shown)

    style = ui.chart_style()
    style = ui.titled_style(
        style,
        "landmark_plot",
        f"After the landmark at {format_plain(at)} {unit}",
        f"Time since the landmark ({unit})",
        probability_title(event),
    )
    rows = compute_beyond.landmark_curves(table.sha256, roles_text, float(at), style.height, table)
    levels = list(dict.fromkeys(rows["group"]))
    chart = charts.step_curve_chart(
        rows,
        style,
        charts.group_colours([g for g in levels if g != charts.ALL_ROWS_LABEL]),
        ticks=charts.nice_ticks(float(rows["time"].max())),
        legend_title=charts.group_title(roles.group) if roles.group else None,
    )
    ui.figure(chart, style, "landmark-curves", "landmark_figure")
    result = compute_beyond.landmark_comparison(
        table.sha256, roles_text, float(at), test, float(rho), float(gamma), table
    )
    if result is None:
        st.info("Set a group column on the Column roles page to compare groups from the landmark.")
    else:
        cols = st.columns(3)
        cols[0].metric("Chi-squared (χ²)", format_number(result.statistic, 2))
        cols[1].metric("Degrees of freedom", result.df)
        cols[2].metric("p-value", ui.fmt_p(result.p_value))
        sentence = "After the landmark: " + comparison_sentence(
            result.test, result.statistic, result.df, result.p_value
        )
        st.markdown(f"**Reading:** {ui.escape(sentence)}")
        st.caption(ui.NOT_SIGNIFICANT_CAUTION)
        share_section.manuscript_box([sentence], "the test after the landmark")
