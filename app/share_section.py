"""Share and replay: download the recipe, restore every page from one, download the report.

``render_share_section()`` draws the section wherever a page calls it; it reads and writes only
the shared session keys of ``app.state`` and the page widget keys listed in ``WIDGETS``, so it
does not depend on how any page is laid out. The pure functions below it are what the tests use.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, MutableMapping
from dataclasses import dataclass, replace

import streamlit as st

from app import state
from app.effects_settings import effects_choices, restore_effects
from app.exports import file_stem
from engine.analysis.recipe import Recipe, make_recipe
from engine.analysis.run import ANALYSIS_DEFAULTS, OPTIONAL_ANALYSES
from engine.errors import HazelError
from engine.prepare.filters import apply_filters
from engine.prepare.roles import Roles
from engine.wording import format_confidence, format_plain

# tuple of engine.prepare.filters.RowFilter in use (none until a page sets it)
FILTERS = "shared_filters"
RESTORED_UPLOAD = "share_restored_upload"  # id of the recipe upload already applied
RESTORE_MESSAGES = "share_restore_messages"  # what the last restore found, shown once
REPORT_HTML = "share_report_html"  # (key of what it was built from, html text)
SOURCE_TABLE = "shared_source_table"  # the table as read, while a filtered copy is in use

# Widget labels of the pages (app/views), value -> label; the AppTest of a restored recipe checks
# that the pages show these values.
TRANSFORM_LABELS = {"log-log": "log-log (default)", "log": "log", "linear": "linear"}
TIES_LABELS = {"efron": "Efron (default)", "breslow": "Breslow"}
RMST_ORIGIN_LABELS = {
    "zero": "Time 0 (survival 1 before the first entry; default)",
    "first_entry": "The first entry",
}
PH_LABELS = {
    "survival": "Survival: time through the Kaplan–Meier estimate (default)",
    "rank": "Rank of the event times",
    "time": "Time as recorded",
    "log-time": "Log of time",
}
VARIANCE_LABELS = {
    "auto": "Automatic (robust when ids repeat)",
    "model": "Model-based",
    "robust": "Robust, clustered by id",
}
# Choices of the Group comparison and Regression pages that are not plain widget values: the
# groups compared (the group role or a numeric column cut at quantiles), the strata, the model's
# covariates and reference levels. The pages use these labels.
ROLE_SOURCE, CUT_SOURCE = "The group column", "A numeric column cut at quantiles"
NO_COMPARE_STRATA, NO_MODEL_STRATA = "(no stratification)", "(no strata)"
CUT_GROUPS = (2, 3, 4, 5)  # the numbers of groups the comparison page offers
REFERENCE_PREFIX = "model_reference_"  # + covariate name: the model's reference level


def _strata_setting(choice, none_label: str, role_strata: str | None):
    """None while the page shows the strata role, False for none instead, else the column."""
    if choice == none_label:
        return False if role_strata else None
    return None if choice == role_strata else str(choice)


def _strata_widget(strata, none_label: str):
    """The page's choice for a strata setting other than None (the page's own default)."""
    return none_label if strata is False or strata == "" else str(strata)


def _page_choices(session: MutableMapping, roles: Roles, settings: dict) -> None:
    """Add the comparison's grouping and strata and the model's covariates, strata and
    reference levels, as their pages show them, to ``settings``."""
    comparison, cox = settings.get("comparison"), settings.get("cox")
    if comparison is not None:
        if session.get("compare_source") == CUT_SOURCE and session.get("compare_cut_column"):
            groups = int(session.get("compare_cut_k") or CUT_GROUPS[0])
            comparison["cut"] = {"column": str(session["compare_cut_column"]), "groups": groups}
        if "compare_strata" in session:
            comparison["strata"] = _strata_setting(
                session["compare_strata"], NO_COMPARE_STRATA, roles.strata
            )
    if cox is not None:
        if "model_covariates" in session:
            chosen = [str(c) for c in session["model_covariates"] if c in roles.covariates]
            cox["covariates"] = None if chosen == list(roles.covariates) else chosen
        if "model_strata" in session:
            cox["strata"] = _strata_setting(session["model_strata"], NO_MODEL_STRATA, roles.strata)
        model = roles.covariates if cox["covariates"] is None else cox["covariates"]
        changed = [
            [column, str(session[REFERENCE_PREFIX + column])]
            for column in model
            if REFERENCE_PREFIX + column in session
            and str(session[REFERENCE_PREFIX + column]) != str(roles.reference_for(column))
        ]
        cox["reference"] = changed or None
    effects_choices(session, settings)


def _restore_page_choices(session: MutableMapping, roles: Roles, settings: dict) -> None:
    """The inverse of ``_page_choices``: a setting left at None keeps the page's default."""
    comparison, cox = settings.get("comparison") or {}, settings.get("cox") or {}
    cut = comparison.get("cut")
    if cut and int(cut.get("groups", 0)) in CUT_GROUPS:
        session["compare_source"] = CUT_SOURCE
        session["compare_cut_column"] = str(cut["column"])
        session["compare_cut_k"] = int(cut["groups"])
    elif roles.group:
        session["compare_source"] = ROLE_SOURCE
    if comparison.get("strata") is not None:
        session["compare_strata"] = _strata_widget(comparison["strata"], NO_COMPARE_STRATA)
    if cox.get("covariates") is not None:
        session["model_covariates"] = [str(c) for c in cox["covariates"] if c in roles.covariates]
    if cox.get("strata") is not None:
        session["model_strata"] = _strata_widget(cox["strata"], NO_MODEL_STRATA)
    for column, level in cox.get("reference") or ():
        session[REFERENCE_PREFIX + str(column)] = str(level)
    restore_effects(session, settings)


# The baseline table page's labels (value -> label).
BASELINE_ALL_ROWS = "(all rows, no groups)"
BASELINE_SUMMARIES = {"median": "Median (quartiles)", "mean": "Mean (SD)"}
BASELINE_COMPARISONS = {
    None: "Nothing more",
    "smd": "Standardised differences",
    "test": "A test per variable",
}

# An optional analysis goes into the recipe (and the report) while its page's switch is on.
INCLUDE_KEYS = {
    "competing": "cr_include",
    "parametric": "param_include",
    "sample_size": "power_include",
    "landmark": "landmark_include",
    "subgroups": "effects_subgroups_include",
    "baseline": "baseline_include",
    "performance": "perf_include",
}


def _labelled(labels: dict) -> tuple[Callable, Callable]:
    back = {v: k for k, v in labels.items()}
    return (lambda v: labels.get(v, v)), (lambda label: back.get(label, label))


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


def _optional_number(value):
    return float(value) if value else None


def _zero_for_none(value):
    return float(value or 0.0)


NO_FINE_GRAY = "(none)"  # the Competing risks page's choice for "no Fine–Gray model"


def _cause_or_none(value):
    return None if value in (None, "", NO_FINE_GRAY) else str(value)


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
    Widget("curves", "rmst_origin", "curves_rmst_origin", *_labelled(RMST_ORIGIN_LABELS)),
    Widget("comparison", "test", "compare_test", _same, _same),
    Widget("comparison", "rho", "compare_rho", float, float),
    Widget("comparison", "gamma", "compare_gamma", float, float),
    Widget("cox", "ties", "model_ties", *_labelled(TIES_LABELS)),
    Widget("cox", "ph_time_scale", "model_ph_time_scale", *_labelled(PH_LABELS)),
    Widget("cox", "variance", "model_variance", *_labelled(VARIANCE_LABELS)),
    Widget("competing", "times", "cr_times", _times_text, _times_from_text),
    Widget("competing", "by_group", "cr_by_group", bool, bool),
    Widget("parametric", "distributions", "param_distributions", list, list),
    Widget("parametric", "by_group", "param_by_group", bool, bool),
    Widget("parametric", "times", "param_times", _times_text, _times_from_text),
    Widget("parametric", "horizon", "param_horizon", _zero_for_none, _optional_number),
    Widget("parametric", "aft_distribution", "param_aft_distribution", _same, _same),
    Widget("sample_size", "hazard_ratio", "power_hr", float, float),
    Widget("sample_size", "alpha", "power_alpha", float, float),
    Widget("sample_size", "sides", "power_sides", int, int),
    Widget("sample_size", "power", "power_power", float, float),
    Widget("sample_size", "allocation_ratio", "power_allocation", float, float),
    Widget("sample_size", "event_probability", "power_event_probability", float, float),
    Widget("sample_size", "events", "power_events", _zero_for_none, _optional_number),
    Widget("landmark", "time", "landmark_time", _zero_for_none, float),
    Widget("landmark", "test", "landmark_test", _same, _same),
    Widget("landmark", "rho", "landmark_rho", float, float),
    Widget("landmark", "gamma", "landmark_gamma", float, float),
    Widget("baseline", "group", "baseline_group", *_labelled({False: BASELINE_ALL_ROWS})),
    Widget("baseline", "variables", "baseline_variables", list, list),
    Widget("baseline", "categorical", "baseline_categorical", list, list),
    Widget("baseline", "summary", "baseline_summary", *_labelled(BASELINE_SUMMARIES)),
    Widget("baseline", "compare", "baseline_compare", *_labelled(BASELINE_COMPARISONS)),
    Widget("competing", "fine_gray", "cr_fine_gray", _same, _cause_or_none),
    Widget("performance", "times", "perf_times", _times_text, _times_from_text),
    Widget("performance", "tau", "perf_tau", _zero_for_none, _optional_number),
    Widget("performance", "calibration_time", "perf_calibration_time", format_plain, float),
    Widget("performance", "risk_groups", "perf_risk_groups", int, int),
    Widget("performance", "replicates", "perf_replicates", int, int),
    Widget("performance", "seed", "perf_seed", int, int),
)


def analyses_in_use(roles: Roles, session: MutableMapping | None = None) -> list[str]:
    """Curves always; a comparison with a group (or a cut); a Cox model with covariates; and
    each optional analysis whose page has its "include" switch on."""
    names = ["curves"]
    if roles.group or (session is not None and session.get("compare_source") == CUT_SOURCE):
        names.append("comparison")
    if roles.covariates:
        names.append("cox")
    for name in OPTIONAL_ANALYSES:
        if session is not None and session.get(INCLUDE_KEYS[name]):
            names.append(name)
    return names


def settings_from_session(session: MutableMapping, roles: Roles) -> dict:
    """Each analysis in use with its settings as the pages show them (defaults where unset)."""
    settings = {name: dict(ANALYSIS_DEFAULTS[name]) for name in analyses_in_use(roles, session)}
    for widget in WIDGETS:
        if widget.analysis in settings and widget.key in session:
            try:
                settings[widget.analysis][widget.setting] = widget.from_widget(session[widget.key])
            except (TypeError, ValueError):
                continue  # a widget value the page has not finished typing keeps the default
    _page_choices(session, roles, settings)
    return settings


def source_table(session: MutableMapping):
    """The table as read from the file: the one in use, or the one a restored filter cut down."""
    table, source = session.get(state.TABLE), session.get(SOURCE_TABLE)
    if table is not None and source is not None and table.sha256.startswith(source.sha256 + ":"):
        return source
    return table


def filtered_table(table, filters):
    """``table`` with only the rows the filters keep, under a fingerprint of its own (so every
    cached result of the pages is keyed on the filtered rows), or ``table`` without filters.
    Filters that keep no row are refused (a HazelError), so no page sees an empty table."""
    if not filters:
        return table
    outcome = apply_filters(table.frame, filters).refuse_if_empty()
    key = json.dumps([f.to_dict() for f in filters], sort_keys=True, default=str)
    digest = hashlib.sha256(key.encode("utf-8")).hexdigest()[:16]
    return replace(table, frame=outcome.frame, sha256=f"{table.sha256}:filters:{digest}")


def recipe_from_session(session: MutableMapping, note: str = "") -> Recipe | None:
    """The recipe of what the session shows now, or None before a table and roles exist."""
    table, roles = source_table(session), session.get(state.ROLES)
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
    from engine.analysis.recipe import check_fingerprint

    table = source_table(session)
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
    in_use = filtered_table(table, recipe.filters)  # refused before anything changes
    state.clear_page_choices(session, PAGE_PREFIXES)
    session[state.ROLES] = roles
    session[state.ROLES_CONFIRMED] = True  # the recipe's roles were chosen by a person
    session[FILTERS] = tuple(recipe.filters)
    session[state.TABLE] = in_use
    if in_use is table:
        if SOURCE_TABLE in session:  # (AppTest's session state has no pop)
            del session[SOURCE_TABLE]
    else:
        session[SOURCE_TABLE] = table
    settings = recipe.settings()
    for name, key in INCLUDE_KEYS.items():
        session[key] = name in settings
    for widget in WIDGETS:
        values = settings.get(widget.analysis, {})
        if widget.setting in values and values[widget.setting] is not None:
            session[widget.key] = widget.to_widget(values[widget.setting])
    _restore_page_choices(session, roles, settings)
    return warnings


# A recipe sets the filters itself (the Row filters page's drafts stay).
PAGE_PREFIXES = tuple(p for p in state.DATA_CHOICE_PREFIXES if p != "filter_")


def _role_columns(roles: Roles) -> list[str]:
    named = [roles.time, roles.start, roles.end, roles.event, roles.group, roles.strata]
    named += [roles.entry, roles.id, *roles.covariates]
    return [c for c in named if c]


# --- drawing -----------------------------------------------------------------------------------


def render_share_section(
    run_analysis: Callable | None = None, report_builder: Callable | None = None
) -> None:
    """Download the recipe, restore from one, download the report.

    ``run_analysis(imported, prepared, settings, source) -> dict`` makes the JSON sections the
    report shows (``app.cli.run_analysis`` by default; ``source`` is the frame the filters kept).
    """
    st.subheader("Share and replay", anchor=False)
    recipe = recipe_from_session(st.session_state)
    table = source_table(st.session_state)
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
        "Restore from a recipe",
        type=["json"],
        key="share_recipe_upload",
        help="A .recipe.json file saved by Hazel. Open its data file first: the recipe holds "
        "the settings, not the data.",
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
        from functools import partial

        from app import exports_office

        stem = f"{file_stem(table.source_name)}-report"
        column.download_button(
            "Download report (HTML)",
            built[1].encode("utf-8"),
            file_name=f"{stem}.html",
            mime="text/html",
            key="share_report_download",
        )
        for label, build, suffix, mime, key, help_text in (
            (
                "Report as Word (.docx)",
                exports_office.report_docx,
                ".docx",
                exports_office.DOCX_MIME,
                "share_report_docx_download",
                "The same report as one Word document, its figures as pictures.",
            ),
            (
                "Report tables (Excel)",
                exports_office.report_xlsx,
                "-tables.xlsx",
                exports_office.XLSX_MIME,
                "share_report_xlsx_download",
                "Every table of the report, one sheet each, rounded as in the report.",
            ),
        ):
            column.download_button(
                label,
                partial(build, built[1]),
                file_name=f"{stem}{suffix}",
                mime=mime,
                key=key,
                on_click="ignore",
                help=help_text,
            )
        return
    clicked = column.button(
        "Build the report",
        key="share_report_button",
        help="One HTML file with every result, figure and the methods; then download it here.",
    )
    if not clicked:
        return
    if run_analysis is None:
        from app.cli import run_analysis  # the lead's JSON sections, shared with the CLI
    if report_builder is None:
        from app.batch import report_from_json_and_results as report_builder
    try:
        # the recipe's own path (filters, roles, checks), so the report equals a CLI replay
        run = apply_recipe(recipe, table)
        results = run_analysis(run.imported, run.prepared, run.settings, run.source)
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


# --- text for a manuscript -----------------------------------------------------------------------


def manuscript_box(sentences, what: str = "these results") -> None:
    """The results worded for a manuscript (engine.wording), in a box with a copy button."""
    sentences = [s for s in sentences if s]
    if not sentences:
        return
    with st.expander(f"Text for a manuscript: {what}", icon=":material/content_copy:"):
        st.code("\n".join(sentences), language=None, wrap_lines=True)
        st.caption(
            "Rounded by one set of rules everywhere (p below 0.001 as '< 0.001'); the copy "
            "button is at the top right of the box. The report holds the same sentences."
        )


def curve_text(
    frame, times, confidence: float, transform: str, unit: str, event: str | None = None
) -> list[str]:
    """Median and survival-at-time sentences for every curve (engine.survival.summary.curves_json),
    naming the event (``engine.prepare.roles.event_in_words``)."""
    from engine.survival.summary import curves_json
    from engine.wording import curve_sentences

    sentences = []
    for curve in curves_json(frame, times=times, confidence=confidence, transform=transform):
        sentences += curve_sentences(curve, unit, confidence, event)
    return sentences


def comparison_text(result) -> list[str]:
    """One sentence for a comparison result of engine.survival.compare."""
    from engine.wording import comparison_sentence

    return [comparison_sentence(result.test, result.statistic, result.df, result.p_value)]


def cox_text(result) -> list[str]:
    """One hazard-ratio sentence per term of an engine.cox.fit result."""
    from engine.wording import cox_sentences

    return cox_sentences(result.to_dict(), result.confidence)


def analysis_text(sections: dict, settings: dict, event: str | None = None) -> list[str]:
    """Every sentence of a run_analysis result (the report's "Text for a manuscript");
    ``event`` names the event in words."""
    from engine.wording import comparison_sentence, cox_sentences, curve_sentences

    unit = sections["data"]["time_unit"]
    confidence = settings["curves"]["confidence"]
    sentences = [s for c in sections["curves"] for s in curve_sentences(c, unit, confidence, event)]
    comparison = sections.get("comparison")
    if comparison:
        sentences.append(
            comparison_sentence(
                comparison["test"], comparison["statistic"], comparison["df"], comparison["p_value"]
            )
        )
    if sections.get("cox"):
        sentences += cox_sentences(sections["cox"], confidence)
    return sentences


@st.cache_data(max_entries=8, show_spinner="Wording the results…")
def recipe_text(recipe_json: str, fingerprint: str, _table) -> str:
    """All sentences for a recipe replayed on the table (the same path as the report)."""
    from app.batch import apply_recipe
    from engine.analysis.run import run_analysis

    run = apply_recipe(Recipe.from_json(recipe_json), _table)
    sections = run_analysis(run.prepared, run.settings, run.source)
    from engine.prepare.roles import event_in_words

    event = event_in_words(run.prepared.roles)
    return "\n".join(analysis_text(sections, run.settings, event))
