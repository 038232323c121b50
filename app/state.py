"""Every session-state key the app uses, in one place.

Shared keys are plain names; a page's own widget keys carry the page prefix (``import_``,
``roles_``, ``curves_``, ``compare_``, ``model_``). Streamlit forgets the value of a widget that
was not drawn in the last run, so ``keep_widget_values`` (called by the entry script on every
run) re-stores the prefixed keys: a choice made on one page is still there after visiting
another.
"""

from __future__ import annotations

from collections.abc import MutableMapping

# Shared, set by code (never a widget key).
TABLE = "shared_table"  # engine.io.tables.ImportedTable in use
DATASET_LABEL = "dataset_label"  # what the sidebar calls it, e.g. "Demo: pump wear trial"
DATASET_IS_DEMO = "dataset_is_demo"
ROLES = "shared_roles"  # engine.prepare.roles.Roles in use
ROLES_PRESET = "shared_roles_preset"  # True when a demo's documented roles were applied
# engine.prepare.roles.RoleSuggestions for the table in use
ROLES_SUGGESTED = "shared_roles_suggested"
# False while the roles in use are Hazel's suggestions (or a demo's preset) that nobody has
# checked yet: every page then says "Suggested roles in use — check them".
ROLES_CONFIRMED = "shared_roles_confirmed"
DATA_VERSION = "data_version"  # bumps when a new table is loaded
PENDING_UPLOAD = "pending_upload"  # (name, bytes) of a file to read on the next run
LOAD_ERROR = "load_error"  # message from the last failed import, shown on the import page

# Shared widget.
PRESENTATION = "view_presentation"

# Page prefixes whose widget values survive page switches.
PERSISTENT_PREFIXES = ("view_", "import_", "roles_", "curves_", "compare_", "model_")
# Widgets whose value cannot be assigned (buttons, uploaders) end with one of these.
NOT_ASSIGNABLE_SUFFIXES = ("_button", "_upload", "_download")


def keep_widget_values(session: MutableMapping) -> None:
    """Re-store every persistent widget value so Streamlit keeps it across page switches."""
    for key in list(session.keys()):
        if (
            isinstance(key, str)
            and key.startswith(PERSISTENT_PREFIXES)
            and not key.endswith(NOT_ASSIGNABLE_SUFFIXES)
        ):
            session[key] = session[key]


def clear_page_choices(session: MutableMapping, prefixes: tuple[str, ...]) -> None:
    """Forget the widget values of these pages (a new table makes them meaningless)."""
    for key in list(session.keys()):
        if (
            isinstance(key, str)
            and key.startswith(prefixes)
            and not key.endswith(NOT_ASSIGNABLE_SUFFIXES)
        ):
            del session[key]


# --- pages beyond the basics and the share page (appended; prefixes of their widget keys) ------
PERSISTENT_PREFIXES = (*PERSISTENT_PREFIXES, "cr_", "param_", "power_", "landmark_")
PERSISTENT_PREFIXES = (*PERSISTENT_PREFIXES, "perf_")  # the prediction-performance page
PERSISTENT_PREFIXES = (*PERSISTENT_PREFIXES, "baseline_")  # the baseline table page

# --- big data (app.bigdata): an aggregated source instead of a table in memory ----------------
SOURCE = "shared_source"  # engine.aggregate.sources.SqlSource in use (its connection inside)
SOURCE_ID = "shared_source_id"  # a random key naming that source in the caches
READ_STOPPED = "shared_read_stopped"  # the (source id, roles) whose read the user stopped

# --- choices that depend on the data in use -------------------------------------------------
# Every page prefix whose widget values name times, levels, columns or counts of the data in use
# (a time typed for one table is outside another's follow-up). They are forgotten whenever a new
# table or source is opened (``forget_data_choices``), so each page starts from its defaults for
# the new data, as in a fresh session. Prefixes left out on purpose: "view_" (chart size),
# "import_" (how files are read), "dbconnect_" (a database address), "share_" (the recipe upload
# already applied; the report is keyed on what it was built from).
DATA_CHOICE_PREFIXES = (
    "roles_", "curves_", "compare_", "model_", "filter_", "cr_", "param_", "power_", "landmark_",
    "effects_", "baseline_", "perf_",
)  # fmt: skip
MODEL_PROFILES = "shared_model_custom_profiles"  # covariates -> [(name, ((column, value), ...))]
PERF_OPTIMISM = "shared_perf_optimism"  # {(model key, replicates, seed): OptimismResult}
DATA_CHOICE_KEYS = (MODEL_PROFILES, PERF_OPTIMISM)  # set by code, from the data in use too


def forget_data_choices(session: MutableMapping) -> None:
    """A new table or source: forget every page's choices made for the previous one."""
    clear_page_choices(session, DATA_CHOICE_PREFIXES)
    for key in DATA_CHOICE_KEYS:
        if key in session:  # (AppTest's session state has no pop)
            del session[key]
