"""Hazel's shells: the Streamlit pages, the chart builders, the HTML report and the command line."""
