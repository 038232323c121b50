"""Sample size and power for comparing two groups: events and subjects needed (Schoenfeld 1983,
Freedman 1982), the power of a given number of events, and power against the hazard ratio."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import charts_models, ui
from engine.errors import HazelError
from engine.survival.sample_size import METHODS, events_needed, power_curve, power_for_events
from engine.wording import hazard_ratio_direction

NAMES = {"schoenfeld": "Schoenfeld (1983)", "freedman": "Freedman (1982)"}

st.title("Sample size and power", anchor=False)
st.caption(
    "For planning a study that compares two groups with the log-rank test (or a Cox model with "
    "one two-level covariate), assuming proportional hazards. No data needed."
)
defaults = {
    "power_hr": 0.7,
    "power_alpha": 0.05,
    "power_sides": 2,
    "power_power": 0.8,
    "power_allocation": 1.0,
    "power_event_probability": 1.0,
    "power_events": 0.0,
}
for key, value in defaults.items():
    ui.remember(key, value)
with st.container(border=True):
    cols = st.columns(3)
    hr = cols[0].number_input(
        "Hazard ratio to detect (experimental vs control)",
        min_value=0.05,
        max_value=20.0,
        step=0.05,
        key="power_hr",
        help="The experimental group's hazard divided by the control group's: below 1 means "
        "fewer events in the experimental group, above 1 more.",
    )
    alpha = cols[1].number_input(
        "Alpha (false-positive rate)", min_value=0.001, max_value=0.5, step=0.01,
        key="power_alpha", format="%.3f",
    )  # fmt: skip
    sides = cols[2].radio(
        "Sides",
        [2, 1],
        key="power_sides",
        format_func=lambda s: "two-sided" if s == 2 else "one-sided",
        horizontal=True,
        help="Two-sided: a difference in either direction counts. One-sided: only the "
        "direction you expect (the hazard ratio's side of 1).",
    )
    cols = st.columns(3)
    power = cols[0].number_input(
        "Power wanted", min_value=0.5, max_value=0.99, step=0.05, key="power_power"
    )
    allocation = cols[1].number_input(
        "Allocation (experimental : control)",
        min_value=0.1,
        max_value=10.0,
        step=0.5,
        key="power_allocation",
        help="2 means twice as many subjects in the experimental group as in the control group.",
    )
    probability = cols[2].number_input(
        "Share of subjects expected to have the event",
        min_value=0.01,
        max_value=1.0,
        step=0.05,
        key="power_event_probability",
        help="Over the study's follow-up; subjects needed = events needed / this share.",
    )
    cols = st.columns([1, 2])
    events = cols[0].number_input(
        "Events you expect (for the power)", min_value=0.0, step=10.0, key="power_events",
        help="0: use the events needed by Schoenfeld's formula.",
    )  # fmt: skip
    ui.remember("power_include", True)
    cols[1].toggle("In the report and recipe", key="power_include")

try:
    needed = [
        events_needed(
            hr,
            power=power,
            alpha=alpha,
            sides=sides,
            allocation_ratio=allocation,
            event_probability=probability,
            method=method,
        )
        for method in METHODS
    ]
except HazelError as error:
    st.error(f"**These inputs cannot be used.** {ui.escape(error)}")
    st.stop()

st.caption(ui.escape(hazard_ratio_direction(hr)))
st.subheader("Events and subjects needed", anchor=False)
cols = st.columns(len(needed))
for col, result in zip(cols, needed, strict=True):
    with col.container(border=True):
        st.markdown(f"**{NAMES[result.method]}**")
        st.metric("Events needed", f"{result.events:,}")
        st.metric("Subjects needed", f"{result.subjects:,}")
        st.caption(
            f"{result.subjects_control:,} control and {result.subjects_experimental:,} "
            f"experimental; exact events {result.events_exact:.1f}."
        )
table = pd.concat([r.to_frame() for r in needed], ignore_index=True)
shown = pd.DataFrame(
    {
        "Formula": table["method"].map(NAMES),
        "Events (exact)": table["events_exact"].map(lambda v: f"{v:,.1f}"),
        "Events": table["events"],
        "Subjects": table["subjects"],
        "Control": table["subjects_control"],
        "Experimental": table["subjects_experimental"],
    }
)
ui.table(table, "sample-size", "power_table", shown=shown)

st.subheader("Power", anchor=False)
given = float(events) if events else float(needed[0].events)
with ui.guard("The power"):
    cols = st.columns(len(METHODS))
    for col, method in zip(cols, METHODS, strict=True):
        value = power_for_events(
            given, hr, alpha=alpha, sides=sides, allocation_ratio=allocation, method=method
        )
        col.metric(f"Power with {given:,.0f} events, {NAMES[method]}", f"{value:.1%}")
    curve = power_curve(given, alpha=alpha, sides=sides, allocation_ratio=allocation)
    style = ui.chart_style()
    style = ui.titled_style(
        style,
        "power_plot",
        f"Power with {given:,.0f} events",
        "Hazard ratio to detect (experimental vs control)",
        "Power",
    )
    data = curve.to_frame().assign(method=lambda f: f["method"].map(NAMES))
    chart = charts_models.power_chart(data, style, target_hr=hr, target_power=power)
    ui.figure(chart, style, "power-curve", "power_figure")
    st.caption(
        "Dashed: the power wanted (horizontal) and the hazard ratio to detect (vertical). Both "
        "formulas are approximations for large samples."
    )
