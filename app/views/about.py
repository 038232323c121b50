"""About Hazel: what it is for, the cautions, privacy, and how the numbers are made."""

from __future__ import annotations

import streamlit as st

from app import ui

st.title("About Hazel", anchor=False)
st.markdown(
    "Hazel explores time-to-event (survival) data on your own computer: how long until an "
    "event happens, how that differs between groups, and which characteristics go with a "
    "higher or lower hazard."
)

with st.container(border=True):
    st.subheader("Cautions", anchor=False)
    ui.show_cautions()

st.subheader("Privacy", anchor=False)
st.markdown(
    "- The app runs on this computer and listens only on 127.0.0.1.\n"
    "- Files you upload are read in memory here; nothing is sent anywhere.\n"
    "- Streamlit's usage statistics are switched off (`browser.gatherUsageStats = false`).\n"
    "- Downloads (figures, tables) are made on this computer when you click them."
)

st.subheader("How the numbers are made", anchor=False)
st.markdown(
    "- Every estimate and test comes from Hazel's `engine` package, which is tested against "
    "published examples and reference libraries; the app only arranges and draws.\n"
    "- Kaplan–Meier curves use Greenwood's variance with a log-log interval by default; "
    "cumulative incidence is 1 − survival, the cumulative hazard is Nelson–Aalen.\n"
    "- Cox models use Efron's method for ties by default.\n"
    "- Curves are drawn with only the step vertices that can be seen at the chart's size; "
    "tables and downloads keep every exact value.\n"
    "- Colours follow the colour-blind-safe palette of Okabe & Ito (2008); a group keeps its "
    "colour on every page."
)
st.caption("Hazel is open-source software under the MIT licence.")
