"""Streamlit entry script: ``streamlit run app/hazel.py``.

Sets up the page, opens the bundled demo when nothing has been loaded yet, draws the sidebar that
every page shares, and hands over to the chosen page (scripts in ``app/views/``).
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:  # `streamlit run app/hazel.py` puts only app/ on the path
    sys.path.insert(0, str(ROOT))

import streamlit as st  # noqa: E402

from app import compute, data, state, ui  # noqa: E402, F401  (compute: load the engine once, up front)

st.set_page_config(
    page_title="Hazel · time-to-event explorer",
    page_icon=":material/timeline:",
    layout="wide",
    initial_sidebar_state="expanded",
)
state.keep_widget_values(st.session_state)
data.ensure_table(st.session_state)

pages = {
    "Data": [
        st.Page(
            "views/data_import.py", title="Data import", icon=":material/upload_file:", default=True
        ),
        st.Page("views/column_roles.py", title="Column roles", icon=":material/view_column:"),
        st.Page("views/row_filters.py", title="Row filters", icon=":material/filter_alt:"),
    ],
    "Analyses": [
        st.Page("views/curves.py", title="Curves", icon=":material/show_chart:"),
        st.Page("views/comparison.py", title="Group comparison", icon=":material/compare_arrows:"),
        st.Page("views/regression.py", title="Regression", icon=":material/account_tree:"),
    ],
    "Help": [st.Page("views/about.py", title="About and cautions", icon=":material/info:")],
}
# --- pages beyond the basics, and saving and sharing (kept in one block for easy merges) -------
pages = {
    **{name: group for name, group in pages.items() if name != "Help"},
    "Beyond the basics": [
        st.Page("views/competing.py", title="Competing risks", icon=":material/call_split:"),
        st.Page("views/parametric.py", title="Parametric models", icon=":material/functions:"),
        st.Page("views/landmark.py", title="Landmark analysis", icon=":material/flag:"),
        st.Page("views/effects.py", title="Effects in depth", icon=":material/insights:"),
        st.Page("views/sample_size.py", title="Sample size and power", icon=":material/calculate:"),
        st.Page("views/baseline.py", title="Baseline table", icon=":material/table_chart:"),
        st.Page("views/performance.py", title="Prediction performance", icon=":material/target:"),
    ],
    "Share": [st.Page("views/share.py", title="Save and share", icon=":material/ios_share:")],
    "Help": pages["Help"],
}
current = st.navigation(pages, expanded=True)  # every page in view (more than ten)
ui.sidebar(pages["Data"][1])
current.run()
