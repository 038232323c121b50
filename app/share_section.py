"""Share and replay: download the recipe, restore every page from one, download the report.

``render_share_section()`` draws the section wherever a page calls it; it reads and writes only
the shared session keys of ``app.state`` and the page widget keys listed in ``WIDGETS``, so it
does not depend on how any page is laid out. The pure functions below it are what the tests use.
"""

from __future__ import annotations

from collections.abc import Callable, MutableMapping
from dataclasses import dataclass

import streamlit as st

from app import state
from app.exports import file_stem
from engine.errors import HazelError
from engine.recipe import ANALYSIS_DEFAULTS, Recipe, make_recipe
from engine.roles import Roles
from engine.wording import format_confidence, format_plain

FILTERS = "shared_filters"  # tuple of engine.filters.RowFilter in use (none until a page sets it)
RESTORED_UPLOAD = "share_restored_upload"  # id of the recipe upload already applied
RESTORE_MESSAGES = "share_restore_messages"  # what the last restore found, shown once
REPORT_HTML = "share_report_html"  # (key of what it was built from, html text)

TRANSFORM_LABELS = {"log-log": "log-log (default)", "log": "log", "linear": "linear"}


@dataclass(frozen=True)
class Widget:
    """One page widget that holds an analysis setting, and how its value maps to the setting."""

    analysis: str
    setting: str
    key: str
    to_widget: Callable
    from_widget: Callable


def _times_text(times) -> str:
    return ", ".join(format_plain(t) for t in times or ())


def _times_from_text(text) -> list[float]:
    parts = [p.strip() for p in str(text or "").replace(";", ",").split(",") if p.strip()]
    try:
        return [float(p) for p in parts]
    except ValueError:
        return []


def _same(value):
    return value


WIDGETS = (
    Widget(
        "curves",
        "confidence",
        "curves_conf",
        format_confidence,
        lambda label: float(str(label).rstrip("%")) / 100.0,
    ),
    Widget(
        "curves",
        "ci_transform",
        "curves_transform",
        lambda v: TRANSFORM_LABELS.get(v, v),
        lambda label: {v: k for k, v in TRANSFORM_LABELS.items()}.get(label, label),
    ),
    Widget("curves", "times", "curves_times", _times_text, _times_from_text),
    Widget(
        "curves",
        "rmst_horizon",
        "curves_tau",
        lambda v: float(v or 0.0),
        lambda v: float(v) if v else None,
    ),
    Widget("comparison", "test", "compare_test", _same, _same),
    Widget("comparison", "rho", "compare_rho", float, float),
    Widget("comparison", "gamma", "compare_gamma", float, float),
    Widget("cox", "ties", "model_ties", _same, _same),
    Widget("cox", "ph_transform", "model_ph_transform", _same, _same),
)


def analyses_in_use(roles: Roles) -> list[str]:
    """Curves always; a comparison with a group; a Cox model with covariates."""
    names = ["curves"]
    if roles.group:
        names.append("comparison")
    if roles.covariates:
        names.append("cox")
    return names


def settings_from_session(session: MutableMapping, roles: Roles) -> dict:
    """Each analysis in use with its settings as the pages show them (defaults where unset)."""
    settings = {name: dict(ANALYSIS_DEFAULTS[name]) for name in analyses_in_use(roles)}
    for widget in WIDGETS:
        if widget.analysis in settings and widget.key in session:
            try:
                settings[widget.analysis][widget.setting] = widget.from_widget(session[widget.key])
            except (TypeError, ValueError):
                continue  # a widget value the page has not finished typing keeps the default
    return settings


def recipe_from_session(session: MutableMapping, note: str = "") -> Recipe | None:
    """The recipe of what the session shows now, or None before a table and roles exist."""
    table, roles = session.get(state.TABLE), session.get(state.ROLES)
    if table is None or roles is None:
        return None
    return make_recipe(
        table,
        roles,
        settings_from_session(session, roles),
        filters=session.get(FILTERS, ()),
        note=note,
    )


def restore_recipe(session: MutableMapping, recipe: Recipe) -> list[str]:
    """Apply a recipe's roles, filters and settings to the table in use; return what differs.

    The data are not in a recipe, so the table must already be open; differences from the
    recipe's data are returned as warnings for the page to show.
    """
    from app.batch import import_option_differences
    from engine.recipe import check_fingerprint

    table = session.get(state.TABLE)
    if table is None:
        raise HazelError(
            "Open the data file first: a recipe holds the settings, not the data. Then upload "
            "the recipe again."
        )
    roles = Roles.from_dict(recipe.roles)
    missing = [c for c in _role_columns(roles) if c not in {str(x) for x in table.frame.columns}]
    if missing:
        raise HazelError(
            "The recipe's roles name columns this table does not have: "
            + ", ".join(repr(c) for c in missing)
            + ". Open the file the recipe was made for."
        )
    warnings = check_fingerprint(recipe, table) + import_option_differences(recipe, table)
    state.clear_page_choices(session, ("roles_", "curves_", "compare_", "model_"))
    session[state.ROLES] = roles
    session[FILTERS] = tuple(recipe.filters)
    for widget in WIDGETS:
        values = recipe.settings().get(widget.analysis, {})
        if widget.setting in values and values[widget.setting] is not None:
            session[widget.key] = widget.to_widget(values[widget.setting])
    return warnings


def _role_columns(roles: Roles) -> list[str]:
    named = [roles.time, roles.start, roles.end, roles.event, roles.group, roles.strata]
    named += [roles.entry, roles.id, *roles.covariates]
    return [c for c in named if c]


# --- drawing -----------------------------------------------------------------------------------


def render_share_section(
    run_analysis: Callable | None = None, report_builder: Callable | None = None
) -> None:
    """Download the recipe, restore from one, download the report.

    ``run_analysis(imported, prepared, settings) -> dict`` makes the JSON sections the report
    shows (``app.cli.run_analysis`` by default).
    """
    st.subheader("Share and replay", anchor=False)
    recipe = recipe_from_session(st.session_state)
    table = st.session_state.get(state.TABLE)
    if recipe is None or table is None:
        st.info("Open a dataset and set its roles first.")
        return
    stem = file_stem(getattr(table, "source_name", "") or "hazel")
    cols = st.columns(3)
    cols[0].download_button(
        "Download recipe",
        recipe.to_json().encode("utf-8"),
        file_name=f"{stem}.recipe.json",
        mime="application/json",
        key="share_recipe_download",
        help="The import options, roles and settings (never the data), to repeat this "
        "analysis in the app or with `python -m app analyze DATA --recipe FILE`.",
    )
    upload = cols[1].file_uploader(
        "Restore from a recipe", type=["json"], key="share_recipe_upload"
    )
    if upload is not None and st.session_state.get(RESTORED_UPLOAD) != upload.file_id:
        st.session_state[RESTORED_UPLOAD] = upload.file_id
        try:
            found = restore_recipe(st.session_state, Recipe.from_json(upload.getvalue()))
        except HazelError as error:
            st.session_state[RESTORE_MESSAGES] = ("error", [str(error)])
        else:
            st.session_state[RESTORE_MESSAGES] = ("warning" if found else "success", found)
        st.rerun()
    kind, messages = st.session_state.pop(RESTORE_MESSAGES, (None, []))
    if kind == "error":
        st.error(messages[0])
    elif kind == "warning":
        st.warning("Recipe applied, but the data differ:\n\n- " + "\n- ".join(messages))
    elif kind == "success":
        st.success("Recipe applied: roles and settings restored on every page.")
    _report_download(cols[2], recipe, table, run_analysis, report_builder)


def _report_download(column, recipe, table, run_analysis, report_builder) -> None:
    from app.batch import apply_recipe

    key = recipe.to_json()
    built = st.session_state.get(REPORT_HTML)
    if built is not None and built[0] == key:
        column.download_button(
            "Download report (HTML)",
            built[1].encode("utf-8"),
            file_name=f"{file_stem(table.source_name)}-report.html",
            mime="text/html",
            key="share_report_download",
        )
        return
    if not column.button("Build the report", key="share_report_button"):
        return
    if run_analysis is None:
        from app.cli import run_analysis  # the lead's JSON sections, shared with the CLI
    if report_builder is None:
        from app.batch import report_from_json_and_results as report_builder
    try:
        # the recipe's own path (filters, roles, checks), so the report equals a CLI replay
        run = apply_recipe(recipe, table)
        results = run_analysis(run.imported, run.prepared, run.settings)
        html_text = report_builder(
            results,
            run.settings,
            imported=run.imported,
            prepared=run.prepared,
            filtered=run.filtered,
            warnings=run.warnings,
        )
    except HazelError as error:
        column.error(f"The report could not be built: {error}")
        return
    st.session_state[REPORT_HTML] = (key, html_text)
    st.rerun()
