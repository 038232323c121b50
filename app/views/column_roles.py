"""Column roles: which column is the time, the event, the group, the covariates; and the
data-quality report of what those roles make of the rows."""

from __future__ import annotations

from dataclasses import replace

import pandas as pd
import streamlit as st

from app import big_views, bigdata, data, state, ui
from engine.errors import HazelError
from engine.prepare.roles import (
    TIME_UNITS,
    Roles,
    covariate_kind,
    default_reference,
    describe_event,
    event_in_words,
)

NONE = "(none)"
DURATION, DATES = "One duration column", "Start and end dates"

st.title("Column roles", anchor=False)
if bigdata.in_use(st.session_state):  # big data: roles from the source's first rows
    big_views.roles_page()
    st.stop()
table = data.current_table(st.session_state)
if table is None:
    st.info("Open a demo or upload a file on the Data import page first.")
    st.page_link("views/data_import.py", label="Data import", icon=":material/upload_file:")
    st.stop()

frame = table.frame
columns = [str(c) for c in frame.columns]
roles: Roles = data.current_roles(st.session_state)
suggested = st.session_state.get(state.ROLES_SUGGESTED)


def suggestion_note(kind: str) -> None:
    """Mark a pre-filled choice as a suggestion, with Hazel's reason."""
    item = getattr(suggested, kind, None) if suggested is not None else None
    if item is not None:
        st.caption(f"Suggested: **{ui.escape(item.column)}**, because {ui.escape(item.reason)}.")


def default(key: str, value) -> None:
    """Pre-fill a widget from the roles in use the first time it is drawn for this table."""
    if key not in st.session_state:
        st.session_state[key] = value


def optional(column: str | None) -> str:
    return column if column in columns else NONE


def named(column: str) -> str:
    """A column with its variable label from an SPSS, Stata or SAS file beside it."""
    return ui.column_title(column, table.column_labels)


def column_choice(where, label: str, key: str, column: str | None, **options) -> str:
    """A column picker with a "none" choice, pre-filled with the role's column."""
    default(key, optional(column))
    return where.selectbox(label, [NONE, *columns], key=key, format_func=named, **options)


def chosen(key: str) -> str | None:
    value = st.session_state.get(key)
    return None if value in (None, NONE) else value


st.caption(
    "Hazel has pre-filled its suggestions from the column names and contents; check each one. "
    "Every page uses these roles, and a change here updates the results that depend on it."
)
if not data.roles_confirmed(st.session_state):
    with st.container(border=True):
        st.warning(ui.SUGGESTED_ROLES_NOTICE, icon=":material/rule:")
        if st.button(
            "I have checked these roles",
            key="roles_confirm_button",
            icon=":material/check:",
            help="Removes the notice on every page; the roles stay as they are shown below.",
        ):
            data.confirm_roles(st.session_state)
            st.rerun()
st.markdown("[Jump to the data-quality report ↓](#data-quality-report)")
if st.session_state.get(state.ROLES_PRESET):
    st.info(
        "This demo opens with the roles its documentation describes; Hazel's own suggestions "
        "are noted under each choice.",
        icon=":material/science:",
    )

if table.value_labels:
    with st.expander("Codes and their value labels, as stored in the file"):
        st.caption(
            "The file gave these codes names (value labels). Where every value of a column has "
            "a name, Hazel shows the names instead of the codes; otherwise the codes are kept."
        )
        ui.table(ui.value_label_frame(table), "value-labels", "roles_value_labels")

# --- time -----------------------------------------------------------------------------------

with st.container(border=True):
    st.subheader("Time", anchor=False)
    default("roles_time_mode", DATES if roles.start and not roles.time else DURATION)
    mode = st.radio(
        "The time to event is", [DURATION, DATES], key="roles_time_mode", horizontal=True
    )
    unit_names = list(TIME_UNITS)
    if mode == DURATION:
        cols = st.columns(2)
        column_choice(cols[0], "Duration column", "roles_time", roles.time)
        default("roles_unit", roles.source_unit or roles.unit)
        cols[1].selectbox(
            "Unit of that column",
            unit_names,
            key="roles_unit",
            help="1 week = 7 days, 1 month = 30.4375 days, 1 year = 365.25 days.",
        )
        suggestion_note("time")
    else:
        default("roles_day_first", bool(roles.day_first))
        default("roles_date_format", roles.date_format or "")
        default("roles_exclude_implausible", roles.implausible_dates == "exclude")
        default("roles_unit", roles.unit)
        cols = st.columns(2)
        column_choice(cols[0], "Start date", "roles_start", roles.start)
        column_choice(cols[1], "End date (event or last seen)", "roles_end", roles.end)
        suggestion_note("start")
        cols = st.columns(3)
        cols[0].selectbox("Express durations in", unit_names, key="roles_unit")
        cols[1].checkbox(
            "Dates are day first (31/12/2024)",
            key="roles_day_first",
            help="Otherwise 01/02/2024 is read as 2 January.",
        )
        cols[2].text_input(
            "Date format (optional)",
            key="roles_date_format",
            placeholder="e.g. %d.%m.%Y",
            help="Only needed when dates are not read correctly.",
        )
        st.checkbox(
            "Leave out rows with a date before 1900 or after today",
            key="roles_exclude_implausible",
            help="Placeholders such as 1900-01-01 or 9999-12-31 are common in registry exports. "
            "Unticked, such rows are kept and the data-quality report counts them; ticked, they "
            "are left out under the reason “implausible date”.",
        )

# --- event ----------------------------------------------------------------------------------

with st.container(border=True):
    st.subheader("Event", anchor=False)
    event_column = column_choice(
        st,
        "Event column",
        "roles_event",
        roles.event,
        help="Without an event column every row counts as an event (no censoring).",
    )
    suggestion_note("event")
    default("roles_event_name", roles.event_name or "")
    st.text_input(
        "The event in words (for titles and sentences)",
        key="roles_event_name",
        placeholder=event_in_words(replace(roles, event_name=None)),
        help="For example relapse, failure or sale: pages then say 'Median time to relapse' "
        "and 'Probability still free of relapse'. Left empty, Hazel uses the word shown in grey.",
    )
    event_values: tuple = ()
    if event_column != NONE:
        coding = describe_event(frame[event_column])
        counts = coding.to_frame()
        values = [v for v, _ in coding.counts if v is not None]
        labels = {str(v): v for v in values}
        default("roles_event_values", [str(v) for v in (roles.event_values or coding.event_values)])
        st.session_state["roles_event_values"] = [
            v for v in st.session_state["roles_event_values"] if v in labels
        ]
        left, right = st.columns([3, 2])
        with left:
            picked = st.multiselect(
                "Values that mean the event happened",
                list(labels),
                key="roles_event_values",
                help="Every other value counts as censored (event not seen by the end of "
                "follow-up). Missing values are excluded and counted in the report.",
            )
            event_values = tuple(labels[v] for v in picked)
            if coding.assumption and not roles.event_values:
                st.warning(coding.assumption, icon=":material/help:")
            if not picked:
                st.error(
                    "Choose the value(s) that mean the event: Hazel does not recognise this "
                    "coding by itself.",
                    icon=":material/error:",
                )
        with right:
            shown = counts.assign(
                value=counts["value"].map(lambda v: "(missing)" if v is None else str(v)),
                meaning=[
                    "missing" if v is None else "event" if str(v) in picked else "censored"
                    for v in counts["value"]
                ],
            )
            ui.table(shown, "event-values", "roles_event_counts")

# --- group, covariates, strata --------------------------------------------------------------

with st.container(border=True):
    st.subheader("Groups and covariates", anchor=False)
    cols = st.columns(2)
    column_choice(
        cols[0],
        "Group to compare (curves and tests)",
        "roles_group",
        roles.group,
        help="A column with a few distinct values, such as treatment arm.",
    )
    with cols[0]:
        suggestion_note("group")
    column_choice(
        cols[1],
        "Strata (optional)",
        "roles_strata",
        roles.strata,
        help="Compared within each stratum, then combined (stratified tests and Cox models).",
    )
    column_choice(
        cols[1],
        "Entry time (delayed entry, optional)",
        "roles_entry",
        roles.entry,
        help="When a subject came under observation, on the same scale as the time column: "
        "they count as at risk only from then on (left truncation).",
    )
    used = {
        chosen("roles_time"),
        chosen("roles_start"),
        chosen("roles_end"),
        chosen("roles_event"),
    }
    candidates = [c for c in columns if c not in used]
    default("roles_covariates", [c for c in roles.covariates if c in candidates])
    st.session_state["roles_covariates"] = [
        c for c in st.session_state["roles_covariates"] if c in candidates
    ]
    covariates = st.multiselect(
        "Covariates (for the Regression page)",
        candidates,
        key="roles_covariates",
        format_func=named,
    )
    if suggested is not None and suggested.covariates:
        st.caption(
            "Suggested: "
            + ", ".join(f"{ui.escape(s.column)} ({s.reason})" for s in suggested.covariates)
        )
    categorical: list[str] = []
    references: list[tuple[str, object]] = []
    if covariates:
        st.markdown("**Covariate types and reference levels**")
        header = st.columns([2, 2, 3])
        header[0].caption("Covariate")
        header[1].caption("Type")
        header[2].caption("Reference level (categorical covariates)")
        for column in covariates:
            kind = covariate_kind(frame[column])
            row = st.columns([2, 2, 3])
            row[0].markdown(ui.escape(named(column)))
            kind_key = f"roles_kind_{column}"
            default(
                kind_key,
                "categorical"
                if column in roles.categorical or kind == "categorical"
                else "numeric",
            )
            options = ["numeric", "categorical"] if kind != "categorical" else ["categorical"]
            picked_kind = row[1].segmented_control(
                "Type",
                options,
                key=kind_key,
                label_visibility="collapsed",
                help="possibly categorical: a number with few distinct values"
                if kind == "possibly categorical"
                else None,
            )
            if picked_kind == "categorical":
                categorical.append(column)
                levels = sorted({str(v) for v in frame[column].dropna().unique()})
                level_values = {str(v): v for v in frame[column].dropna().unique()}
                ref_key = f"roles_reference_{column}"
                fallback = roles.reference_for(column)
                if fallback is None:
                    fallback = default_reference(frame[column])
                default(ref_key, str(fallback))
                if st.session_state[ref_key] not in levels and levels:
                    st.session_state[ref_key] = levels[0]
                ref = row[2].selectbox(
                    "Reference level",
                    levels,
                    key=ref_key,
                    label_visibility="collapsed",
                    help="Hazard ratios compare every other level with this one.",
                )
                if ref is not None:
                    references.append((column, level_values[ref]))
            elif kind == "possibly categorical":
                row[2].caption("A number with few distinct values: is it a coded category?")

# --- apply ----------------------------------------------------------------------------------

mode_dates = st.session_state["roles_time_mode"] == DATES
new_roles = Roles(
    time=None if mode_dates else chosen("roles_time"),
    start=chosen("roles_start") if mode_dates else None,
    end=chosen("roles_end") if mode_dates else None,
    date_format=(st.session_state.get("roles_date_format") or None) if mode_dates else None,
    day_first=bool(st.session_state.get("roles_day_first")) if mode_dates else False,
    implausible_dates="exclude"
    if mode_dates and st.session_state.get("roles_exclude_implausible")
    else "warn",
    unit=st.session_state["roles_unit"],
    event=chosen("roles_event"),
    event_values=event_values,
    event_name=(st.session_state.get("roles_event_name") or "").strip() or None,
    group=chosen("roles_group"),
    covariates=tuple(covariates),
    categorical=tuple(categorical),
    reference=tuple(references),
    strata=chosen("roles_strata"),
    entry=chosen("roles_entry"),
    id=roles.id if roles.id in columns else None,
    # causes are named on the Competing risks page; they hold while the event column does
    event_causes=roles.event_causes if chosen("roles_event") == roles.event else (),
)
if new_roles != roles:
    data.set_roles(st.session_state, new_roles)
    st.rerun()  # the sidebar, drawn before this page, shows the new roles

# --- data-quality report --------------------------------------------------------------------

st.header("Data-quality report", anchor="data-quality-report")
try:
    prepared = data.prepared(table, new_roles)
except HazelError as error:
    st.error(f"These roles cannot be used yet. {ui.escape(error)}", icon=":material/error:")
    st.stop()

report = prepared.report
cols = st.columns(5 if report.competing_events else 4)
cols[0].metric("Rows read", f"{report.rows_read:,}")
cols[1].metric("Rows used", f"{report.rows_used:,}")
cols[2].metric("Events", f"{report.events:,}")
if report.competing_events:
    cols[3].metric("Competing events", f"{report.competing_events:,}")
cols[-1].metric("Censored", f"{report.censored:,}")

if report.warnings:
    for note in report.warnings:
        st.warning(ui.escape(note), icon=":material/warning:")
else:
    st.success("No warnings about these rows.", icon=":material/check_circle:")

left, right = st.columns(2, gap="large")
with left:
    st.markdown("**Rows left out, by reason**")
    excluded = report.to_frame()
    if excluded.empty:
        st.caption("None: every row is used.")
    else:
        ui.table(excluded, "excluded-by-reason", "roles_excluded")
        with st.expander("See the rows left out"):
            ui.table(
                prepared.excluded_rows.head(5000),
                "excluded-rows",
                "roles_excluded_rows",
            )
with right:
    st.markdown("**Events and censored per group**")
    ui.table(report.group_counts, "group-counts", "roles_group_counts")

with ui.guard("The follow-up summary"):
    from engine.survival.curves import median_follow_up

    follow = median_follow_up(prepared.frame["_time"], prepared.frame["_event"])
    st.markdown(
        f"**Median follow-up** (reverse Kaplan–Meier): "
        f"{ui.fmt_num(follow.estimate)} {report.time_unit}"
        + (
            f" (interval {ui.fmt_num(follow.lower)} to {ui.fmt_num(follow.upper)})"
            if follow.lower is not None
            else ""
        )
        + (f" — {follow.reason}" if follow.reason else "")
    )
    times = pd.Series(prepared.frame["_time"])
    st.caption(f"Observed times from {times.min():,.4g} to {times.max():,.4g} {report.time_unit}.")
