"""HTML building blocks of the report: escaping, table cells and tables, sanitised inline SVG.

Everything here writes HTML text; every string that came from the user or the data goes through
``escape``, and figures through ``sanitize_svg`` so the report loads nothing.
"""

from __future__ import annotations

import functools
import html
import re
from collections.abc import Iterable, Mapping, Sequence

from engine.analysis.run import NOT_COMPUTED, is_not_computed
from engine.text_safety import visible_text
from engine.wording import format_interval, format_number, format_p, format_plain

# --- escaping and small pieces -----------------------------------------------------------------


def escape(value: object) -> str:
    """HTML-escape any text shown in the report, and defuse web addresses.

    Addresses (``http://``, ``https://``) are broken with a zero-width space so nothing in the
    report can be read as a link or a resource to fetch, even where user text contains one.
    """
    shown = "" if value is None else visible_text(value)  # direction controls as [U+202E]
    text = html.escape(shown, quote=True)
    return re.sub(r"(?i)(https?|ftp):(//)", r"\1:&#8203;\2", text)


def cell(value: object, text: str | None = None, numeric: bool = False) -> str:
    if numeric:
        exact = "" if value is None else escape(repr(value) if isinstance(value, float) else value)
        return f'<td class="num" data-value="{exact}">{escape(text)}</td>'
    return f"<td>{escape(value if text is None else text)}</td>"


def num(value, text: str) -> str:
    return cell(value, text, numeric=True)


def table(headers: Sequence[str], rows: Iterable[Sequence[str]], caption: str = "") -> str:
    """``rows`` are lists of ready ``<td>`` strings (built with ``cell`` / ``num``)."""
    head = "".join(f"<th>{escape(h)}</th>" for h in headers)
    body = "".join(f"<tr>{''.join(r)}</tr>" for r in rows)
    cap = f"<caption>{escape(caption)}</caption>" if caption else ""
    return (
        f'<div class="wide"><table>{cap}<thead><tr>{head}</tr></thead>'
        f"<tbody>{body}</tbody></table></div>"
    )


def bullets(items: Iterable[str], css: str = "") -> str:
    items = list(items)
    if not items:
        return ""
    cls = f' class="{css}"' if css else ""
    return f"<ul{cls}>" + "".join(f"<li>{escape(i)}</li>" for i in items) + "</ul>"


def group_label(group) -> str:
    return "All rows" if group is None else str(group)


def interval(lower, upper, fmt) -> str:
    """An interval cell, kept on one line; "not estimable" once when it has no limit."""
    return f'<td class="ci">{escape(format_interval(lower, upper, fmt))}</td>'


def record_rows(records: Sequence[Mapping]) -> tuple[list[str], list[list[str]]]:
    """A table of plain records (for optional extra results): numbers rounded, text escaped."""
    headers = list(dict.fromkeys(k for r in records for k in r))
    rows = []
    for r in records:
        row = []
        for key in headers:
            value = r.get(key)
            if isinstance(value, bool) or not isinstance(value, int | float):
                row.append(cell("" if value is None else value))
            elif isinstance(value, int):
                row.append(num(value, f"{value:,}"))
            elif key == "p" or key.startswith("p_") or key.endswith(("_p", "p_value")):
                row.append(num(value, format_p(value)))
            else:
                row.append(num(value, format_number(value, 2)))
        rows.append(row)
    return [header_words(h) for h in headers], rows


HEADER_WORDS = {
    "group_a": "Group",
    "group_b": "Against",
    "statistic": "Chi-squared",
    "df": "Degrees of freedom",
    "p_value": "p",
    "p_holm": "p (Holm)",
    "p_bh": "p (Benjamini–Hochberg)",
    "std_err": "Standard error",
    "se": "Standard error",
    "n": "Subjects",
}


def header_words(key: str) -> str:
    """A column header in words for a record key (``p_value`` -> 'p')."""
    if key in HEADER_WORDS:
        return HEADER_WORDS[key]
    text = key.replace("_", " ")
    return text[:1].upper() + text[1:]


def statistics_table(tests: Sequence[tuple[str, Mapping | None]], first: str = "Test") -> str:
    """Chi-squared tests, one row each; a missing test (None) is skipped."""
    rows = []
    for name, t in tests:
        if not t:
            continue
        rows.append(
            [
                cell(name),
                num(t.get("statistic"), format_number(t.get("statistic"), 2)),
                num(t.get("df"), "" if t.get("df") is None else format_plain(t["df"])),
                num(t.get("p_value"), format_p(t.get("p_value"))),
            ]
        )
    return table([first, "Chi-squared", "Degrees of freedom", "p"], rows) if rows else ""


def estimate_cells(row: Mapping, estimate: str, fmt) -> list[str]:
    return [
        num(row.get(estimate), fmt(row.get(estimate))),
        interval(row["lower"], row["upper"], fmt),
    ]


# --- figures -----------------------------------------------------------------------------------

_ADDRESS_ATTRIBUTE = re.compile(r"""\s[\w:-]+\s*=\s*(["'])\s*(?:https?:|ftp:|//)[^"']*\1""", re.I)
_SCRIPT = re.compile(r"<script\b.*?</script\s*>", re.I | re.S)
_EVENT_ATTRIBUTE = re.compile(r"""\son\w+\s*=\s*(["']).*?\1""", re.I | re.S)
_XML_PROLOGUE = re.compile(r"<\?xml[^>]*\?>|<!DOCTYPE[^>]*>", re.I)


def sanitize_svg(svg: str) -> str:
    """SVG fit to inline in the report: no namespace addresses, links, scripts or handlers.

    Inline SVG in HTML needs no ``xmlns``; vl-convert writes the SVG and XLink namespace URLs,
    which are the only addresses its output holds. Anything else that points outside is
    removed too, and text (already XML-escaped by vl-convert) has its addresses defused.
    """
    svg = _XML_PROLOGUE.sub("", svg)
    svg = _SCRIPT.sub("", svg)
    svg = _EVENT_ATTRIBUTE.sub("", svg)
    svg = _ADDRESS_ATTRIBUTE.sub("", svg)
    svg = re.sub(r"(?i)url\(\s*['\"]?\s*(?:https?:|//)[^)]*\)", "none", svg)
    return re.sub(r"(?i)(https?|ftp):(//)", r"\1:&#8203;\2", svg).strip()


_INVISIBLE_MARK = re.compile(r"""<path(?=[^>]*\sopacity="0")[^>]*/>""")
_MARK_ARIA = re.compile(r'\s(?:aria-label|aria-roledescription|role)="[^"]*"')


def compact_svg(svg: str) -> str:
    """Drop what only an interactive chart uses: invisible hover targets and per-mark labels.

    A Kaplan–Meier figure on a large dataset keeps a transparent point per vertex for tooltips,
    each with a spoken description; on paper they are two thirds of the file.
    """
    svg = _INVISIBLE_MARK.sub("", svg)
    return _MARK_ARIA.sub("", svg).replace("<svg ", '<svg role="img" ', 1)


def figure_svg(figure) -> str:
    """An Altair chart, a Vega-Lite dict or ready SVG text, as sanitised inline SVG."""
    if isinstance(figure, str):
        return sanitize_svg(figure)
    # imported here: the command line loads this module without drawing anything
    import altair as alt

    from app import exports

    # The data were thinned to what can be seen, yet several curves together can pass
    # Altair's 5,000-row guard; lift it for this conversion only (restored on exit).
    with alt.data_transformers.enable("default", max_rows=None):
        svg = exports.figure_svg(figure)
    return compact_svg(sanitize_svg(svg))


def figure_block(figure, caption: str) -> str:
    if figure is None:
        return ""
    return f"<figure>{figure_svg(figure)}<figcaption>{escape(caption)}</figcaption></figure>"


# --- sections that could not be computed -----------------------------------------------------


def not_computed_block(title: str, section: Mapping, level: int = 2) -> str:
    """A section (or part) that could not be computed: its title and the reason, in place."""
    return (
        f"<h{level}>{escape(title)}</h{level}>\n"
        f'<p class="not-computed"><strong>Not computed.</strong> '
        f"{escape(section[NOT_COMPUTED])}</p>"
    )


def or_reason(title: str):
    """Decorate a section writer: when its JSON part is ``{"not_computed": reason}`` the report
    shows the title and the reason instead, and every other section is still written."""

    def decorate(write):
        @functools.wraps(write)
        def section(part, *args, **kwargs):
            if is_not_computed(part):
                return not_computed_block(title, part)
            return write(part, *args, **kwargs)

        return section

    return decorate
