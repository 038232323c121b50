"""Streamlit entry script: ``streamlit run app/hazel.py``."""

import streamlit as st

st.set_page_config(page_title="Hazel", layout="wide")
st.title("Hazel")
st.write("Exploring time-to-event data. The pages arrive with the app issue.")
