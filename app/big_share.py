"""Save and share for big data: the recipe and the report of an aggregated source (a file or
folder read by DuckDB, a PostgreSQL table or query), from the same per-time counts the big-data
pages draw. The recipe replays with ``python -m app analyze DATA --recipe FILE`` on any backend;
its fingerprint and the report name the source and the backend, never a user name or password.
"""

from __future__ import annotations

import json
from collections.abc import Mapping

import streamlit as st

from app import bigdata, cli_scale, data, state, ui
from app.big_views import CONFIDENCE
from app.exports import file_stem
from engine.analysis.run import ANALYSIS_DEFAULTS, CORE_ANALYSES


def page_settings(session: Mapping) -> dict:
    """The settings the big-data pages are showing: the curves' confidence level and the
    comparison's test; every other setting at its default."""
    chosen = {
        "curves": {"confidence": CONFIDENCE.get(session.get("curves_conf"), 0.95)},
        "comparison": {"test": session.get("compare_test_big") or "logrank"},
        "cox": {},
    }
    return {name: {**ANALYSIS_DEFAULTS[name], **chosen[name]} for name in CORE_ANALYSES}


@st.cache_resource(max_entries=4, show_spinner=False)
def fingerprint(source_id: str, rows_read: int, _source):
    """The source's fingerprint (a SHA-256 of a file or folder's bytes: read once per source)."""
    from engine.aggregate.sources import source_fingerprint

    return source_fingerprint(_source, rows_read)


def recipe_and_report(session: Mapping):
    """The recipe (JSON text) and the HTML report of the roles and page settings in use."""
    from app.batch import aggregated_curve_figure, report_from_json_and_results
    from engine.analysis.recipe import Recipe, software_versions

    source, source_id = session[state.SOURCE], session[state.SOURCE_ID]
    roles = data.current_roles(session)
    roles_text = data.roles_key(roles)
    settings = page_settings(session)
    aggregated = bigdata.aggregated(source_id, roles_text, source)
    sections = dict(bigdata.analysis(source_id, roles_text, json.dumps(settings), source))
    sections["computed_with"] = cli_scale.computed_with(source)
    found = fingerprint(source_id, aggregated.report.rows_read, source)
    recipe = Recipe(
        fingerprint=found,
        import_options={},
        roles=roles.to_dict(),
        analyses=settings,
        software=software_versions(),
    )
    figure = aggregated_curve_figure(
        aggregated.counts, settings, aggregated.report.time_unit, roles
    )
    html = report_from_json_and_results(
        sections, settings, roles=roles, fingerprint=found, figures={"curves": figure}
    )
    return recipe.to_json(), html


def render() -> None:
    """The Save and share page for big data: download the recipe and the report."""
    session = st.session_state
    source = session[state.SOURCE]
    roles = data.current_roles(session)
    st.subheader("Share and replay", anchor=False)
    if roles is None or roles.time is None:
        st.info("Set the column roles first (at least the time column).")
        st.page_link("views/column_roles.py", label="Column roles", icon=":material/view_column:")
        return
    st.caption(
        f"Big data: {ui.escape(source.name)} stays where it is. The recipe holds the roles and "
        "the settings of the Curves, Group comparison and Regression pages, and the source's "
        "fingerprint; the report shows what those pages show. Neither holds a row, a user name "
        "or a password. Replay with `python -m app analyze DATA --recipe RECIPE.json` (any "
        "backend: the numbers are the same)."
    )
    with ui.guard("The recipe and report"):
        with st.spinner(f"Computing the report in {source.backend}…"):
            recipe_text, html = recipe_and_report(session)
        stem = file_stem(source.name)
        cols = st.columns(2)
        cols[0].download_button(
            "Download recipe",
            recipe_text.encode("utf-8"),
            file_name=f"{stem}.recipe.json",
            mime="application/json",
            key="share_big_recipe_download",
        )
        cols[1].download_button(
            "Download report (HTML)",
            html.encode("utf-8"),
            file_name=f"{stem}-report.html",
            mime="text/html",
            key="share_big_report_download",
        )
