"""Save and share: the recipe (download and restore), the HTML report, the filters in use and
every result worded for a manuscript."""

from __future__ import annotations

import streamlit as st

from app import big_share, bigdata, data, row_filters, share_section, ui
from engine.errors import HazelError

st.title("Save and share", anchor=False)
if bigdata.in_use(st.session_state):
    big_share.render()
    st.stop()
st.caption(
    "A recipe is a small file with the import options, column roles, filters and settings of "
    "every page (never the data). Send it with the data file and a colleague sees the same "
    "numbers, in the app or with `python -m app analyze DATA --recipe RECIPE.json`."
)
table = share_section.source_table(st.session_state)
roles = data.current_roles(st.session_state)
share_section.render_share_section()

filters = st.session_state.get(share_section.FILTERS, ())
if filters:
    st.subheader("Row filters in use", anchor=False)
    st.markdown("\n".join(f"- {ui.escape(f.describe())}" for f in filters))
    in_use = data.current_table(st.session_state)
    if in_use is not None and table is not None:
        st.caption(f"{len(in_use.frame):,} of {len(table.frame):,} rows pass the filters.")
    st.page_link("views/row_filters.py", label="Change the filters", icon=":material/filter_alt:")
    if st.button("Remove the filters", key="share_filters_clear_button"):
        row_filters.set_filters(st.session_state, ())
        st.rerun()

if table is None or roles is None:
    st.stop()
st.subheader("Text for a manuscript", anchor=False)
with ui.guard("The manuscript text"):
    recipe = share_section.recipe_from_session(st.session_state)
    try:
        text = share_section.recipe_text(recipe.to_json(), table.sha256, table)
    except HazelError as error:
        st.info(f"Set the column roles first. {ui.escape(error)}")
        st.stop()
    st.code(text, language=None, wrap_lines=True)
    st.caption(
        "Curves, comparison and Cox model with the settings of their pages; the copy button is "
        "at the top right of the box."
    )
