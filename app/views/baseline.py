"""Baseline table: the subjects at the start, overall and by group, as a manuscript's first
table; optionally with standardised differences or a test per variable."""

from __future__ import annotations

import json

import streamlit as st

from app import compute_beyond, data, share_section, ui
from engine.analysis.baseline import SMD_NOTE, TEST_CAUTION, display_frame
from engine.analysis.extra import baseline_columns
from engine.prepare.roles import covariate_kind

st.title("Baseline table", anchor=False)
st.caption(
    "What the subjects looked like at the start: counts and percentages for categories, the "
    "median with its quartiles or the mean with its standard deviation for numbers, and the "
    "number missing, for all rows and for each group. It describes the rows the analyses use "
    "(after the filters and the data checks)."
)
table, roles = ui.table_and_roles_or_stop()
prepared = ui.prepared_or_stop(table, roles, "the baseline table can be built")
source = table.frame
columns = [str(c) for c in source.columns]


def named(column) -> str:
    return ui.column_title(column, table.column_labels)


defaults = baseline_columns(prepared, source)
top = st.columns([2, 2, 2, 2])
group_options = [share_section.BASELINE_ALL_ROWS, *columns]
ui.remember_choice("baseline_group", group_options, roles.group or share_section.BASELINE_ALL_ROWS)
group = top[0].selectbox(
    "Groups (columns of the table)",
    group_options,
    key="baseline_group",
    format_func=lambda c: c if c == share_section.BASELINE_ALL_ROWS else named(c),
    help="Usually the treatment arm: the group column of the roles is chosen first.",
)
summaries = list(share_section.BASELINE_SUMMARIES.values())
ui.remember("baseline_summary", summaries[0])
summary = top[1].segmented_control("Numbers as", summaries, key="baseline_summary")
comparisons = list(share_section.BASELINE_COMPARISONS.values())
ui.remember("baseline_compare", comparisons[0])
compare = top[2].selectbox("Beside each row", comparisons, key="baseline_compare")
ui.remember("baseline_include", True)
top[3].toggle("In the report and recipe", key="baseline_include")

candidates = [c for c in columns if c != group]
ui.remember("baseline_variables", [c for c in defaults if c in candidates])
st.session_state["baseline_variables"] = [
    c for c in st.session_state["baseline_variables"] if c in candidates
]
variables = st.multiselect(
    "Variables (rows of the table)",
    candidates,
    key="baseline_variables",
    format_func=named,
    help="By default the covariates of the roles, or every column without a role.",
)
numeric = [c for c in variables if covariate_kind(source[c]) != "categorical"]
ui.remember(
    "baseline_categorical",
    [
        c
        for c in numeric
        if c in roles.categorical or covariate_kind(source[c]) == "possibly categorical"
    ],
)
st.session_state["baseline_categorical"] = [
    c for c in st.session_state["baseline_categorical"] if c in numeric
]
st.multiselect(
    "Numbers that are codes of categories (counted by level)",
    numeric,
    key="baseline_categorical",
    format_func=named,
    help="A number with few distinct whole values, such as a stage coded 1 to 4, is proposed.",
)
if not variables:
    st.info("Choose at least one variable.")
    st.stop()

settings = share_section.settings_from_session(st.session_state, roles).get("baseline")
if settings is None:  # the switch is off: the page still shows the table
    from engine.analysis.run import ANALYSIS_DEFAULTS

    settings = dict(ANALYSIS_DEFAULTS["baseline"])
    for widget in share_section.WIDGETS:
        if widget.analysis == "baseline" and widget.key in st.session_state:
            settings[widget.setting] = widget.from_widget(st.session_state[widget.key])

with ui.guard("The baseline table"):
    settings_text = json.dumps(settings, sort_keys=True, default=str)
    result = compute_beyond.baseline(table.sha256, data.roles_key(roles), settings_text, table)
    st.caption(
        f"{len(prepared.frame):,} rows"
        + (
            f" in {len(result.groups)} group{'s' if len(result.groups) != 1 else ''} of "
            f"{ui.escape(named(group))}"
            if result.group
            else ""
        )
        + ". Percentages are of the non-missing values in each group; rows without a group "
        "count under all rows only."
    )
    shown = display_frame(result, labels=table.column_labels)
    ui.table(result.to_frame(), "baseline-table", "baseline_table", shown=shown, manuscript=shown)
    if result.compare == "test":
        st.warning(TEST_CAUTION, icon=":material/warning:")
    elif result.compare == "smd":
        st.caption(SMD_NOTE)
