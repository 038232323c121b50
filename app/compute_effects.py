"""Cached engine calls for the *Effects in depth* page: the Cox model's splines, the model
refitted on follow-up split at times, and subgroup effects. Keyed like ``app.compute`` (the
data's fingerprint, the roles, the settings as JSON text); results are the JSON-ready objects
the command line writes, so the page, the report and the CLI show the same numbers.
"""

from __future__ import annotations

import json

import streamlit as st

from app import data
from engine.analysis.run import NOT_COMPUTED, is_not_computed
from engine.errors import AnalysisError
from engine.io.tables import ImportedTable


def _prepared(fingerprint: str, roles_text: str, table: ImportedTable):
    return data.prepared_by_key(fingerprint, roles_text, table)


def computed_or_raise(section):
    """The section, or its reason as an ``AnalysisError`` when it is ``{"not_computed": ...}``,
    so ``ui.guard`` shows the engine's own sentence (the result stays cached either way)."""
    if is_not_computed(section):
        raise AnalysisError(section[NOT_COMPUTED])
    return section


@st.cache_data(max_entries=16, show_spinner="Fitting the splines…")
def splines(fingerprint: str, roles_text: str, cox_text: str, _table: ImportedTable) -> list:
    """``cox.splines`` of the JSON for these Cox settings (``cox_text``: JSON of the settings)."""
    from engine.analysis.run import cox_additions

    cox = {**json.loads(cox_text), "split": None}
    return cox_additions(_prepared(fingerprint, roles_text, _table), cox, _table.frame)["splines"]


@st.cache_data(max_entries=16, show_spinner="Splitting follow-up and refitting…")
def time_split(fingerprint: str, roles_text: str, cox_text: str, _table: ImportedTable) -> dict:
    """``cox.time_split`` of the JSON for these Cox settings."""
    from engine.analysis.run import cox_additions

    cox = {**json.loads(cox_text), "splines": []}
    prepared = _prepared(fingerprint, roles_text, _table)
    return cox_additions(prepared, cox, _table.frame)["time_split"]


@st.cache_data(max_entries=16, show_spinner="Fitting a model per subgroup…")
def subgroups(fingerprint: str, roles_text: str, settings_text: str, _table: ImportedTable) -> dict:
    """The ``subgroups`` section for these settings (JSON text of {"subgroups", "cox"})."""
    from engine.analysis.extra import extra_sections
    from engine.analysis.run import resolved_settings

    settings = resolved_settings(json.loads(settings_text))
    prepared = _prepared(fingerprint, roles_text, _table)
    return extra_sections(prepared, settings, _table.frame)["subgroups"]
