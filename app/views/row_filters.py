"""Row filters: keep only some rows (patients over 65, two of the sites...) for every page, the
report and the recipe, with the rows each filter keeps and removes shown as it is built."""

from __future__ import annotations

import math

import pandas as pd
import streamlit as st

from app import big_views, bigdata, row_filters, share_section, ui
from engine.errors import HazelError

MESSAGE = "filter_message"  # (kind, text) of the last change, shown once after the rerun

st.title("Row filters", anchor=False)
if bigdata.in_use(st.session_state):
    big_views.needs_rows()
st.caption(
    "Keep only the rows you want to analyse, for example patients aged 65 or more, or two of "
    "the sites. Filters run in order on the rows as read, before the data checks; every page, "
    "the report and the recipe then use only the rows they keep. A filter also drops the rows "
    "where its column is missing."
)
source = share_section.source_table(st.session_state)
if source is None:
    st.info("Open a demo or upload a file on the Data import page first.")
    st.stop()

kind, text = st.session_state.pop(MESSAGE, (None, ""))
if kind == "error":
    st.error(ui.escape(text), icon=":material/error:")
elif kind == "success":
    st.success(ui.escape(text), icon=":material/check_circle:")

filters = row_filters.in_use(st.session_state)
current = row_filters.outcome(st.session_state)
total = len(source.frame)
cols = st.columns(3)
cols[0].metric("Rows in the file", f"{total:,}")
cols[1].metric("Rows kept", f"{len(current.frame):,}")
cols[2].metric("Rows removed by filters", f"{total - len(current.frame):,}")


def apply(new_filters, done: str) -> None:
    try:
        row_filters.set_filters(st.session_state, new_filters)
    except HazelError as error:
        st.session_state[MESSAGE] = ("error", str(error))
    else:
        st.session_state[MESSAGE] = ("success", done)
    st.rerun()


# --- filters in use -------------------------------------------------------------------------

st.subheader("Filters in use", anchor=False)
if not filters:
    st.caption("None: every row of the file is used.")
else:
    remaining = total
    for index, ((words, removed), row_filter) in enumerate(
        zip(current.excluded, filters, strict=True)
    ):
        remaining -= removed
        line = st.columns([6, 3, 1], vertical_alignment="center")
        line[0].markdown(f"**{index + 1}.** {ui.escape(words)}")
        line[1].caption(f"removes {removed:,} · {remaining:,} rows left")
        if line[2].button(
            "Remove",
            key=f"filter_remove_{index}_button",
            icon=":material/close:",
            help="Remove this filter; the others stay.",
        ):
            kept = filters[:index] + filters[index + 1 :]
            apply(kept, f"Removed the filter '{row_filter.describe()}'.")
    if st.button("Remove every filter", key="filter_clear_button", icon=":material/delete:"):
        apply((), "Every filter removed: all rows of the file are used again.")

# --- the builder ----------------------------------------------------------------------------

st.subheader("Add a filter", anchor=False)
frame = source.frame
columns = [str(c) for c in frame.columns]
with st.container(border=True):
    top = st.columns([3, 2])
    column = top[0].selectbox(
        "Column",
        columns,
        key="filter_column",
        format_func=lambda c: ui.column_title(c, source.column_labels),
    )
    series = frame[column]
    rules = row_filters.rules_for(series)
    ui.remember_choice("filter_rule", rules, rules[0])
    rule = top[1].selectbox(
        "Keep the rows where the column",
        rules,
        key="filter_rule",
        format_func=row_filters.RULE_WORDS.get,
    )
    values: list = []
    if rule in ("in", "not_in"):
        options = row_filters.listed_values(series)
        values = st.multiselect(
            "Values",
            options,
            key=f"filter_values_{column}",
            help="The column's values, the most frequent first.",
        )
    elif rule in row_filters.NUMERIC_RULES:
        numbers = pd.to_numeric(series, errors="coerce").dropna()
        low = float(numbers.min()) if len(numbers) else 0.0
        high = float(numbers.max()) if len(numbers) else 0.0
        step = 1.0 if all(float(v).is_integer() for v in numbers.head(1000)) else None
        st.caption(f"Values in the file: from {low:g} to {high:g}.")
        limits = st.columns(2)
        if rule in ("between", "at_least"):
            values.append(
                limits[0].number_input(
                    "From (inclusive)" if rule == "between" else "At least",
                    value=low,
                    step=step,
                    key=f"filter_low_{column}",
                )
            )
        if rule in ("between", "at_most"):
            where = limits[1] if rule == "between" else limits[0]
            values.append(
                where.number_input(
                    "To (inclusive)" if rule == "between" else "At most",
                    value=high,
                    step=step,
                    key=f"filter_high_{column}",
                )
            )
        values = [v for v in values if v is not None and not math.isnan(v)]
    candidate = None
    try:
        candidate = row_filters.make_filter(column, rule, values)
    except HazelError:
        st.caption("Choose at least one value.")
    if candidate is not None:
        kept, removed = row_filters.preview(st.session_state, candidate)
        st.markdown(
            f"**{ui.escape(candidate.describe())}** would keep **{kept:,}** rows and remove "
            f"**{removed:,}** of the {len(current.frame):,} left by the filters in use."
        )
        if kept == 0:
            st.warning(
                "This filter would remove every remaining row, so it cannot be added. Choose "
                "other values.",
                icon=":material/warning:",
            )
    if st.button(
        "Add this filter",
        key="filter_add_button",
        icon=":material/filter_alt:",
        type="primary",
        disabled=candidate is None,
    ):
        apply((*filters, candidate), f"Added the filter '{candidate.describe()}'.")

st.caption(
    "The filters are saved in the recipe (Save and share page) and listed in the report with "
    "the rows each one removed."
)
st.page_link(
    "views/column_roles.py",
    label="Next: check the column roles and the data-quality report",
    icon=":material/arrow_forward:",
)
