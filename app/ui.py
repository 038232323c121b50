"""Pieces every page uses: cautions, figure and table blocks with downloads, error boundaries."""

from __future__ import annotations

import contextlib
import logging
from collections.abc import Iterator
from functools import partial

import altair as alt
import pandas as pd
import streamlit as st

from app import charts, exports, state
from engine.errors import HazelError
from engine.text_safety import visible_frame, visible_text
from engine.wording import format_number, format_p

log = logging.getLogger("hazel.app")

CAUTIONS = (
    "Results support research and exploration, **not decisions about an individual patient**.",
    "Important conclusions need review by a **qualified statistician**.",
    "Your data **stays on this computer**: nothing is uploaded anywhere and usage statistics "
    "are switched off.",
    "Follow your local **ethics and data-protection rules** for identifiable data.",
)

NOT_SIGNIFICANT_CAUTION = (
    "A test that is not significant does not show that the groups are the same: "
    "it may only mean there were too few events to see a difference."
)


SUGGESTED_ROLES_NOTICE = (
    "**Suggested roles in use — check them.** Hazel guessed the column roles from the names "
    "and contents and applied them so the pages work at once. Check them on the Column roles "
    "page and confirm them there."
)


def show_cautions() -> None:
    st.markdown("\n".join(f"- {line}" for line in CAUTIONS))


def escape(text: object) -> str:
    """User text (column names, labels) shown literally in markdown (Streamlit never renders
    raw HTML in markdown here, so markdown's own characters are the ones to neutralise)."""
    escaped = visible_text(text)  # direction controls and control characters as [U+XXXX]
    for ch in "\\`*_[]{}#|~<>$:":
        escaped = escaped.replace(ch, "\\" + ch)
    return escaped


def chart_style() -> charts.ChartStyle:
    """The style for this run: the presentation switch gives larger type and lines."""
    if st.session_state.get(state.PRESENTATION, False):
        return charts.ChartStyle.presentation()
    return charts.ChartStyle()


def label_inputs(prefix: str, title: str, x_title: str, y_title: str) -> tuple[str, str, str]:
    """Editable title and axis labels for one figure; left empty, each keeps its default."""
    with st.expander("Title and axis labels"):
        cols = st.columns(3)
        typed = (
            cols[0].text_input("Title", placeholder=title, key=f"{prefix}_title"),
            cols[1].text_input("Horizontal axis", placeholder=x_title, key=f"{prefix}_xlabel"),
            cols[2].text_input("Vertical axis", placeholder=y_title, key=f"{prefix}_ylabel"),
        )
        st.caption("Leave a box empty to keep the label shown in grey.")
    return tuple(t.strip() or d for t, d in zip(typed, (title, x_title, y_title), strict=True))


def titled_style(
    style: charts.ChartStyle, prefix: str, title: str, x_title: str, y_title: str
) -> charts.ChartStyle:
    """``style`` with the title and axis labels typed in `label_inputs` (or these defaults)."""
    return style.titled(*label_inputs(prefix, title, x_title, y_title))


def figure(chart: alt.TopLevelMixin, style: charts.ChartStyle, name: str, key: str) -> None:
    """Draw a chart, with PNG and SVG downloads made only when asked for."""
    finished = charts.finish(chart, style)
    st.vega_lite_chart(finished, theme=None, width="content")
    stem = exports.file_stem(style.title or name, name)
    png, svg, _ = st.columns([1, 1, 6])
    png_help = "Picture at twice the screen size, for slides and documents."
    svg_help = "Vector drawing that stays sharp at any size."
    svg_mime = "image/svg+xml"
    _download(png, "png", partial(exports.figure_png, finished), stem, "image/png", key, png_help)
    _download(svg, "svg", partial(exports.figure_svg, finished), stem, svg_mime, key, svg_help)


def _download(
    where, kind: str, make, stem: str, mime: str, key: str, help_text: str, label: str = ""
) -> None:
    """A download button in ``where`` whose file ``make()`` builds only when it is clicked."""
    where.download_button(
        label or kind.upper(),
        data=make,
        file_name=f"{stem}.{kind}",
        mime=mime,
        key=f"{key}_{kind}_download",
        on_click="ignore",
        icon=":material/download:",
        help=help_text,
    )


def table(
    frame: pd.DataFrame,
    name: str,
    key: str,
    *,
    shown: pd.DataFrame | None = None,
    column_config: dict | None = None,
    manuscript: pd.DataFrame | None = None,
) -> None:
    """Show a table (``shown`` may be a rounded view) and offer the exact values as CSV, and
    the table rounded for a manuscript as an Excel sheet and a Word table (``manuscript``: a
    page's own worded table, else ``frame`` rounded by ``engine.analysis.manuscript_tables``)."""
    from app import exports_office

    st.dataframe(
        visible_frame(frame if shown is None else shown),
        hide_index=True,
        column_config=column_config,
        width="stretch",
    )
    stem = exports.file_stem(name)
    title = name.replace("-", " ").capitalize()
    csv, xlsx, docx, _ = st.columns([1, 1, 1, 5])
    csv_help = "Every exact value, safe to open in a spreadsheet."
    _download(csv, "csv", partial(exports.table_csv, frame), stem, "text/csv", key, csv_help)
    make_xlsx = partial(exports_office.table_xlsx, frame, title, manuscript)
    xlsx_help = "Rounded as in a manuscript on the first sheet; every exact value on the second."
    mime = exports_office.XLSX_MIME
    _download(xlsx, "xlsx", make_xlsx, stem, mime, key, xlsx_help, label="Excel")
    make_docx = partial(exports_office.table_docx, frame, title, manuscript)
    docx_help = "A Word table rounded by the rules of the manuscript sentences."
    mime = exports_office.DOCX_MIME
    _download(docx, "docx", make_docx, stem, mime, key, docx_help, label="Word")


@contextlib.contextmanager
def guard(what: str) -> Iterator[None]:
    """Run one analysis block; a failure shows a message here and leaves the rest of the page."""
    try:
        yield
    except HazelError as error:
        st.error(f"**{what} could not be computed.** {escape(error)}", icon=":material/error:")
    except Exception as error:  # the page must survive any failure of one block
        log.exception("unexpected failure in %s", what)
        st.error(
            f"**{what} failed unexpectedly** ({type(error).__name__}: {escape(error)}). The other "
            "results and pages still work. Try other settings; if it keeps happening, note the "
            "steps and report it.",
            icon=":material/error:",
        )


def table_and_roles_or_stop():
    """The table and roles in use, or a pointer to the Data import page, and stop."""
    from app import big_views, bigdata, data

    if bigdata.in_use(st.session_state):
        big_views.needs_rows()
    table = data.current_table(st.session_state)
    roles = data.current_roles(st.session_state)
    if table is None or roles is None:
        st.info("Open a demo or upload a file on the Data import page first.")
        st.stop()
    return table, roles


def prepared_or_stop(table, roles, what: str):
    """The prepared data for a page, or a message with a way to fix the roles, and stop."""
    from app import data

    try:
        return data.prepared(table, roles)
    except HazelError as error:
        st.error(f"The column roles need attention before {what}. {escape(error)}")
    except Exception as error:  # the page must never show a traceback
        log.exception("preparing the data failed")
        st.error(
            f"The data could not be prepared ({type(error).__name__}: {escape(error)}). Check "
            "the column roles; if it keeps happening, note the steps and report it."
        )
    st.page_link("views/column_roles.py", label="Fix the column roles", icon=":material/build:")
    st.stop()


def fmt_p(p: float | None) -> str:
    """p-values as the report prints them (``engine.wording.format_p``: 3 decimals, '< 0.001');
    '—' when there is none."""
    if p is None or pd.isna(p):
        return "—"
    return format_p(float(p))


def test_table(tests: pd.DataFrame, first: str) -> pd.DataFrame:
    """Chi-squared tests (columns variable, statistic, df, p_value) with plain-word headers,
    rounded as in the report; the first column is headed ``first``."""
    return pd.DataFrame(
        {
            first: tests["variable"].astype(str),
            "Chi-squared": tests["statistic"].map(lambda v: format_number(v, 2)),
            "Degrees of freedom": tests["df"],
            "p": tests["p_value"].map(fmt_p),
        }
    )


def fmt_num(value: float | None, digits: int = 3) -> str:
    if value is None or pd.isna(value):
        return "—"
    return f"{value:.{digits}g}" if abs(value) < 1e5 else f"{value:,.0f}"


def roles_lines(roles) -> list[str]:
    """The roles in use, one short line each, for the sidebar."""
    if roles.time:
        time = f"{escape(roles.time)} ({roles.source_unit or roles.unit})"
    elif roles.start and roles.end:
        time = f"{escape(roles.end)} − {escape(roles.start)} (in {roles.unit})"
    else:
        time = "not set"
    lines = [f"Time: {time}"]
    if roles.event:
        values = ", ".join(escape(v) for v in roles.event_values) or "recognised coding"
        lines.append(f"Event: {escape(roles.event)} = {values}")
    else:
        lines.append("Event: not set (every row counts as an event)")
    lines.append(f"Group: {escape(roles.group) if roles.group else 'none'}")
    if roles.covariates:
        lines.append("Covariates: " + ", ".join(escape(c) for c in roles.covariates))
    if roles.strata:
        lines.append(f"Strata: {escape(roles.strata)}")
    return lines


def sidebar(roles_page) -> None:
    """Dataset, roles, rows used and events, on every page."""
    from app import data  # local: data imports the engine's checks, ui must stay light

    with st.sidebar:
        st.toggle(
            "Presentation mode",
            key=state.PRESENTATION,
            help="Larger type and thicker lines, for a projector.",
        )
        table = data.current_table(st.session_state)
        source = st.session_state.get(state.SOURCE)
        if source is not None:  # big data: nothing counted here (the pages do it, cached)
            st.markdown(
                "**Dataset**  \n"
                + escape(st.session_state.get(state.DATASET_LABEL, source.name))
                + "  \n:blue-badge[Big data: read where it is]"
            )
            st.markdown(
                "**Roles**  \n" + "  \n".join(roles_lines(data.current_roles(st.session_state)))
            )
            st.caption("Data stays on this computer. For research and exploration only.")
            return
        if table is None:
            st.info("No data loaded yet.")
            return
        label = st.session_state.get(state.DATASET_LABEL, table.source_name)
        demo = st.session_state.get(state.DATASET_IS_DEMO, False)
        st.markdown(
            "**Dataset**  \n"
            + escape(label)
            + ("  \n:orange-badge[Invented demo data]" if demo else "")
        )
        roles = data.current_roles(st.session_state)
        if not data.roles_confirmed(st.session_state):
            st.warning(SUGGESTED_ROLES_NOTICE, icon=":material/rule:")
        st.markdown("**Roles**  \n" + "  \n".join(roles_lines(roles)))
        try:
            report = data.prepared(table, roles).report
        except Exception as error:  # the sidebar must draw whatever the roles
            st.warning(f"The roles need attention: {escape(error)}", icon=":material/warning:")
        else:
            competing = report.competing_events
            st.markdown(
                f"**Rows used** {report.rows_used:,} of {report.rows_read:,}  \n"
                f"**Events** {report.events:,} · "
                + (f"**competing events** {competing:,} · " if competing else "")
                + f"**censored** {report.censored:,}"
            )
            if report.warnings:
                st.caption(f"{len(report.warnings)} data warning(s)")
        st.page_link(roles_page, label="Data-quality report", icon=":material/fact_check:")
        st.caption("Data stays on this computer. For research and exploration only.")


def column_title(column, labels) -> str:
    """``column`` with its variable label (``ImportedTable.column_labels``) beside it."""
    label = (labels or {}).get(str(column), "")
    return f"{column} — {label}" if label else str(column)


def value_label_frame(table) -> pd.DataFrame:
    """The value labels of a statistical-package file: column, code, label, and whether the
    column shows the labels (every value present labelled) or keeps its codes."""
    rows = []
    for column, pairs in table.value_labels.items():
        shown = column in table.frame.columns and not pd.api.types.is_numeric_dtype(
            table.frame[column]
        )
        for code, label in pairs:
            rows.append(
                {
                    "column": column,
                    "code": code,
                    "label": label,
                    "shown as": "label" if shown else "code",
                }
            )
    return pd.DataFrame(rows, columns=["column", "code", "label", "shown as"])


def remember(key: str, value) -> None:
    """Give a widget its first value through session state (never as a widget argument too:
    that clashes with the values kept across page switches)."""
    if key not in st.session_state:
        st.session_state[key] = value


def remember_choices(key: str, options, value: list) -> None:
    """``remember`` for a multiselect, keeping only the kept choices still among the options."""
    remember(key, value)
    st.session_state[key] = [v for v in st.session_state[key] if v in options]


def remember_choice(key: str, options: list, value) -> None:
    """Like ``remember``, and reset a kept choice that is no longer among the options."""
    if st.session_state.get(key) not in options:
        st.session_state[key] = value if value in options else (options[0] if options else None)
