"""Placeholder."""

import streamlit as st

st.title("regression")
