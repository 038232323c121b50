"""What the Column roles, Curves, Group comparison and Regression pages show for an aggregated
source (``app.bigdata``): the roles picked from the source's first rows, and the results
``engine.aggregate`` computes where the rows are, drawn with the same chart builders and tables
as for data in memory. Every other page says in one sentence that it needs the rows."""

from __future__ import annotations

import json

import pandas as pd
import streamlit as st

from app import batch, bigdata, charts, charts_models, compute, data, state, ui
from engine.prepare.roles import TIME_UNITS, event_in_words
from engine.survival.curves import MEDIAN_FOOTNOTE
from engine.wording import (
    format_confidence,
    format_interval,
    format_nonzero,
    format_p,
    format_ratio,
    free_name,
)

NONE = "(none)"
CONFIDENCE = {"95%": 0.95, "90%": 0.90, "99%": 0.99, "80%": 0.80}


def source_and_roles():
    session = st.session_state
    return session[state.SOURCE], session[state.SOURCE_ID], data.current_roles(session)


def needs_rows() -> None:
    """The one sentence a page that needs the rows shows for big data, then stop."""
    st.info(bigdata.NEEDS_ROWS.format(limit=bigdata.memory_limit_text()), icon=":material/info:")
    st.page_link("views/data_import.py", label="Data import", icon=":material/upload_file:")
    st.stop()


def aggregated_or_stop(roles, what: str):
    """The aggregated data for these roles (with progress shown and a Stop reading button
    while the source is read), or the reason, and stop."""
    from engine.aggregate.sources import SourceError

    source, source_id, _ = source_and_roles()
    roles_text = data.roles_key(roles)
    read = [source_id, roles_text]
    session = st.session_state
    if session.get(state.READ_STOPPED) == read:
        st.info(
            f"Reading {ui.escape(source.name)} was stopped; the database cancelled the "
            "statement and nothing was kept.",
            icon=":material/stop_circle:",
        )
        st.button("Read again", key="big_read_again_button", on_click=_read_again)
        st.stop()
    stop = st.empty()
    stop.button(
        "Stop reading", key="big_stop_reading_button", icon=":material/stop_circle:",
        on_click=_stop_reading, args=(read,),
    )  # fmt: skip
    try:
        with st.status(f"Counting {source.name} in {source.backend}…", expanded=False) as status:
            result = bigdata.aggregated(source_id, roles_text, source)
            status.update(label=f"Counted {source.name} in {source.backend}", state="complete")
    except SourceError as error:  # the database's failure (a timeout, a lost connection)
        stop.empty()
        st.error(ui.escape(error), icon=":material/error:")
        st.stop()
    except Exception as error:
        stop.empty()
        st.error(f"The column roles need attention before {what}. {ui.escape(error)}")
        st.page_link("views/column_roles.py", label="Fix the column roles", icon=":material/build:")
        st.stop()
    stop.empty()
    return result, roles_text


def _stop_reading(read: list) -> None:
    """The Stop reading button: its click ends the run (the read in progress is cancelled by
    the source's ``wait`` hook) and this callback keeps the next runs from reading again."""
    st.session_state[state.READ_STOPPED] = read


def _read_again() -> None:
    st.session_state.pop(state.READ_STOPPED, None)


def rows_caption(report) -> None:
    excluded = report.rows_read - report.rows_used
    st.caption(
        f"Computed where the data are, without loading the rows: {report.rows_read:,} rows read, "
        f"{report.rows_used:,} used, {excluded:,} excluded · {report.events:,} events, "
        f"{report.censored:,} censored."
    )


# --- column roles ------------------------------------------------------------------------------


def roles_page() -> None:
    """Roles chosen from the source's columns; the first rows give types and suggestions."""
    source, _, roles = source_and_roles()
    sample = source.sample()
    columns = [str(c) for c in sample.columns]
    options = [NONE, *columns]
    st.caption(
        f"Big data: {ui.escape(source.name)} stays where it is. The choices below use its "
        f"first {len(sample):,} rows for column types and suggestions."
    )

    def pick(label: str, key: str, current, help_text: str | None = None):
        ui.remember_choice(key, options, current or NONE)
        value = st.selectbox(label, options, key=key, help=help_text)
        return None if value == NONE else value

    cols = st.columns(3)
    with cols[0]:
        time = pick("Time (a duration)", "roles_big_time", roles.time)
        ui.remember_choice("roles_big_unit", list(TIME_UNITS), roles.unit)
        unit = st.selectbox("Time unit", list(TIME_UNITS), key="roles_big_unit")
    with cols[1]:
        event = pick("Event (1/0, yes/no, ...)", "roles_big_event", roles.event)
        group = pick("Group", "roles_big_group", roles.group)
    with cols[2]:
        strata = pick("Strata", "roles_big_strata", roles.strata)
        ui.remember_choices("roles_big_covariates", columns, list(roles.covariates))
        covariates = st.multiselect("Covariates", columns, key="roles_big_covariates")
    text_like = [c for c in covariates if not pd.api.types.is_numeric_dtype(sample[c])]
    ui.remember_choices("roles_big_categorical", covariates, text_like)
    categorical = st.multiselect(
        "Covariates to treat as categories", covariates, key="roles_big_categorical"
    )
    chosen = data.current_roles(st.session_state).__class__(
        time=time,
        unit=unit,
        event=event,
        group=group,
        strata=strata,
        covariates=tuple(covariates),
        categorical=tuple(dict.fromkeys([*categorical, *text_like])),
    )
    if chosen != roles:
        data.set_roles(st.session_state, chosen)
        roles = chosen
    if st.button("These roles are right", key="roles_big_confirm_button"):
        data.confirm_roles(st.session_state)
    if time is None:
        st.info("Choose the time column to see the data-quality report.")
        return
    result, _ = aggregated_or_stop(roles, "the data can be checked")
    report = result.report
    rows_caption(report)
    for warning in report.warnings:
        st.warning(ui.escape(warning), icon=":material/warning:")
    ui.table(report.to_frame(), "data-report", "roles_big_report")


# --- curves ------------------------------------------------------------------------------------


def curves_page() -> None:
    _, source_id, roles = source_and_roles()
    result, roles_text = aggregated_or_stop(data.curve_roles(roles), "curves can be drawn")
    curves_block(source_id, roles_text, roles, result)


@st.fragment
def curves_block(source_id: str, roles_text: str, roles, result) -> None:
    """The display choices, the figure and the table: a fragment, so a display switch reruns
    this block from the cached curves and counts, not the page."""
    source = st.session_state[state.SOURCE]
    report = result.report
    has_group = result.counts.group_labels is not None
    row = st.columns([2, 3, 2])
    ui.remember("curves_for", "Each group" if has_group else "All rows")
    by_group = (
        row[0].segmented_control(
            "Curves for", ["All rows", "Each group"], key="curves_for", disabled=not has_group
        )
        == "Each group"
        and has_group
    )
    scales = {
        "Probability still free of the event": compute.SURVIVAL,
        "Cumulative incidence (1 − survival)": compute.INCIDENCE,
    }
    scale = scales[row[1].selectbox("Show", list(scales), key="curves_scale_big")]
    confidence = CONFIDENCE[
        row[2].selectbox("Confidence level", list(CONFIDENCE), key="curves_conf")
    ]
    toggles = st.columns(4)
    for key in ("curves_band", "curves_censor", "curves_risk"):
        ui.remember(key, True)
    band = toggles[0].toggle("Interval band", key="curves_band")
    censor = toggles[1].toggle("Censoring marks", key="curves_censor")
    risk = toggles[2].toggle("Numbers at risk", key="curves_risk")
    event = event_in_words(roles)
    style = ui.titled_style(
        ui.chart_style(),
        "curves",
        free_name(event).capitalize() + (f" by {roles.group}" if by_group else ", all rows"),
        f"Time ({report.time_unit})",
        "Probability",
    )
    with ui.guard("The curves"):
        with st.spinner("Estimating the curves from the counts…"):
            curves = bigdata.curve_set(source_id, roles_text, confidence, "log-log", source)
        drawing = compute.drawing_from_curves(
            curves.curves, curves.curves, scale, by_group, (style.width, style.height), None
        )
        levels = [str(g) for g in result.counts.group_labels] if has_group else []
        colours = charts.group_colours(levels)
        ticks = charts.nice_ticks(drawing["x_upper"])
        chart = charts.step_curve_chart(
            drawing["curves"],
            style,
            colours,
            censored=drawing["censored"] if censor else None,
            band=band,
            y_domain=drawing["y_domain"],
            x_max=drawing["x_upper"],
            ticks=ticks,
            legend_title=charts.group_title(roles.group) if by_group else None,
            align_with_table=risk,
        )
        risk_chart = None
        if risk:
            table = bigdata.numbers_at_risk(source_id, roles_text, tuple(ticks), by_group, source)
            numbers = table.to_frame()
            numbers["group"] = numbers["group"].map(compute.label_text)
            risk_chart = charts.at_risk_chart(
                numbers.rename(columns={"tick": "time"}),
                style,
                colours,
                x_max=drawing["x_upper"],
                ticks=ticks,
            )
        ui.figure(
            charts.curve_with_risk_table(chart, risk_chart, style), style, "curves", "curves_figure"
        )
        rows_caption(report)
        settings = {"curves": {"confidence": confidence}}
        section = bigdata.analysis(source_id, roles_text, json.dumps(settings), source)["curves"]
        ui.table(summary_frame(section), "curve-summary", "curves_big_summary")
        st.caption(MEDIAN_FOOTNOTE)


def summary_frame(section: list) -> pd.DataFrame:
    """Subjects, events and the median with its interval, per curve of the JSON section."""

    def median(m: dict) -> str:
        if m["estimate"] is None:
            return "not reached"
        lower, upper = (
            "not reached" if m[k] is None else ui.fmt_num(m[k]) for k in ("lower", "upper")
        )
        return f"{ui.fmt_num(m['estimate'])} ({lower} to {upper})"

    return pd.DataFrame(
        {
            "Group": [compute.label_text(g["group"]) for g in section],
            "Subjects": [g["n"] for g in section],
            "Events": [g["events"] for g in section],
            "Median (interval)": [median(g["median"]) for g in section],
            "Median": [g["median"]["estimate"] for g in section],
        }
    )


# --- group comparison --------------------------------------------------------------------------


def comparison_page() -> None:
    _, source_id, roles = source_and_roles()
    source = st.session_state[state.SOURCE]
    if roles.group is None:
        st.info("No group column is set. Choose one on the Column roles page.")
        st.page_link("views/column_roles.py", label="Column roles", icon=":material/view_column:")
        return
    result, roles_text = aggregated_or_stop(data.curve_roles(roles), "groups can be compared")
    tests = ["logrank", "gehan-breslow", "tarone-ware", "peto-peto"]
    test = st.selectbox("Test", tests, key="compare_test_big")
    settings = {"comparison": {"test": test}}
    with ui.guard("The comparison"):
        with st.spinner("Comparing the groups from the counts…"):
            sections = bigdata.analysis(source_id, roles_text, json.dumps(settings), source)
        comparison = sections["comparison"]
        if comparison is None:
            st.info("The data have fewer than two groups to compare.")
            return
        if "not_computed" in comparison:
            st.info(ui.escape(comparison["not_computed"]))
            return
        frame = pd.DataFrame([{"variable": comparison["test"], **comparison}])
        shown = frame[["test", "statistic", "df", "p_value"]].rename(
            columns={"test": "Test", "statistic": "Chi-squared", "df": "Degrees of freedom"}
        )
        ui.table(frame, "group-comparison", "compare_big_test", shown=shown)
        rows_caption(result.report)


# --- regression --------------------------------------------------------------------------------


def hazard_ratio_frame(result) -> pd.DataFrame:
    """The hazard-ratio table as the Regression page shows it (shared with data in memory)."""
    terms = result.to_frame()
    ci = f"{format_confidence(result.confidence)} CI"
    return pd.DataFrame(
        {
            "Term": [t.label for t in result.design.terms],
            "Hazard ratio": terms["hazard_ratio"].map(format_ratio),
            ci: [
                format_interval(lo, hi)  # "not estimable" for a coefficient running off
                for lo, hi in zip(terms["lower"], terms["upper"], strict=True)
            ],
            "p": terms["p_value"].map(format_p),
            "Coefficient (log hazard ratio)": terms["coef"].map(lambda v: format_nonzero(v, 3)),
            "Standard error": terms["se"].map(lambda v: format_nonzero(v, 3)),
        }
    )


def regression_page() -> None:
    _, source_id, roles = source_and_roles()
    source = st.session_state[state.SOURCE]
    if not roles.covariates:
        st.info("Choose covariates on the Column roles page to fit a Cox model.")
        st.page_link("views/column_roles.py", label="Column roles", icon=":material/view_column:")
        return
    model_roles = data.model_roles(roles)
    result, roles_text = aggregated_or_stop(model_roles, "a model can be fitted")
    with ui.guard("The Cox model"):
        with st.spinner("Fitting the Cox model from per-time sums (a few passes over the data)…"):
            cox, ph = bigdata.cox_model(source_id, roles_text, "{}", source)
        ui.table(
            cox.to_frame(), "cox-hazard-ratios", "model_big_terms", shown=hazard_ratio_frame(cox)
        )
        sections = bigdata.analysis(source_id, roles_text, "{}", source)
        rows = batch.forest_rows(sections["cox"])
        style = ui.chart_style()
        ui.figure(
            charts_models.forest_chart(rows, style, confidence=cox.confidence),
            style,
            "forest-plot",
            "model_big_forest",
        )
        rows_caption(result.report)
        if isinstance(ph, dict) and "not_computed" in ph:
            st.caption(ui.escape(ph["not_computed"]))
