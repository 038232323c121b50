"""Tables for a manuscript: an Excel sheet and a Word table of any result table, and the whole
report as one Word document with its figures.

Tables are rounded by ``engine.analysis.manuscript_tables`` (the rules of the manuscript
sentences). The
Excel workbook has the rounded table on its first sheet, kept as numbers where a number is shown
(a percentage as a fraction formatted as a percentage), and every exact value on a second sheet.
Text is always stored as text, never as a formula (openpyxl would otherwise write a cell starting
with "=" as one). The Word report is made from the HTML report itself, so it holds the same
headings, tables, sentences, warnings and cautions, with each inline SVG figure turned into a PNG
by vl-convert. Nothing here touches streamlit.
"""

from __future__ import annotations

import io
import re
from collections.abc import Sequence
from decimal import Decimal, InvalidOperation
from html.parser import HTMLParser

import pandas as pd

from engine.analysis.manuscript_tables import manuscript_frame

XLSX_MIME = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
DOCX_MIME = "application/vnd.openxmlformats-officedocument.wordprocessingml.document"
ROUNDING_NOTE = (
    "Rounded by Hazel's manuscript rules: times 1 decimal, survival as a percentage with 1 "
    "decimal, hazard ratios 2 decimals, test statistics 2 decimals, p-values 3 decimals; a "
    "non-zero value those decimals would show as zero keeps 2 significant figures."
)
# A number as the tables write it: an optional minus (ASCII or U+2212), digits with or without
# thousands separators, decimals, a power of ten (1.27e+13) or a per cent sign.
_NUMBER = re.compile(r"^[-−]?(\d{1,3}(,\d{3})+|\d+)(\.\d+)?([eE][-+]?\d+|%)?$")


# --- Excel ---------------------------------------------------------------------------------------


def _excel_value(text: str):
    """(value, number format) for a rounded cell: numbers stay numbers, shown as the table
    wrote them (decimals, thousands separators, per cent, power of ten); the rest text."""
    if not _NUMBER.match(text):
        return text, None
    body = text.replace("−", "-")
    percent, scientific = body.endswith("%"), "e" in body.lower()
    digits = body.rstrip("%")
    mantissa = re.split(r"[eE]", digits)[0]
    decimals = len(mantissa.split(".")[1]) if "." in mantissa else 0
    try:
        number = Decimal(digits.replace(",", ""))
    except InvalidOperation:  # pragma: no cover - the pattern admits only numbers
        return text, None
    places = "." + "0" * decimals if decimals else ""
    if percent:
        return float(number / 100), f"0{places}%"
    if scientific:
        return float(number), f"0{places}E+00"
    value = int(number) if not decimals else float(number)
    return value, ("#,##0" if "," in digits else "0") + places


def _write_sheet(sheet, header: Sequence[str], rows, formats=None) -> None:
    from openpyxl.styles import Font

    for column, name in enumerate(header, start=1):
        cell = sheet.cell(row=1, column=column)
        _set_text(cell, str(name))
        cell.font = Font(bold=True)
    for r, row in enumerate(rows, start=2):
        for column, value in enumerate(row, start=1):
            cell = sheet.cell(row=r, column=column)
            if isinstance(value, str):
                _set_text(cell, value)
            elif value is None or (isinstance(value, float) and pd.isna(value)):
                continue
            else:
                cell.value = value
            fmt = formats[r - 2][column - 1] if formats else None
            if fmt:
                cell.number_format = fmt
    for column, name in enumerate(header, start=1):
        width = max([len(str(name)), *(len(str(row[column - 1])) for row in rows)])
        sheet.column_dimensions[sheet.cell(row=1, column=column).column_letter].width = min(
            60, width + 2
        )


def _set_text(cell, text: str) -> None:
    """Text as text: never a formula, whatever it starts with."""
    cell.value = text
    cell.data_type = "s"


def _plain_value(value):
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime()
    if hasattr(value, "item") and not isinstance(value, str):
        try:
            return value.item()
        except (ValueError, AttributeError):
            return str(value)
    if isinstance(value, float | int | str) or value is None:
        return value
    return str(value)


def table_xlsx(frame: pd.DataFrame, title: str = "", manuscript: pd.DataFrame | None = None):
    """An .xlsx workbook: the table rounded for a manuscript ("Table"), exact values ("Exact
    values"). ``manuscript`` replaces the rounded table when a page already worded it."""
    from openpyxl import Workbook

    rounded = manuscript if manuscript is not None else manuscript_frame(frame, title)
    book = Workbook()
    sheet = book.active
    sheet.title = "Table"
    cells = [[_excel_value(str(v)) for v in row] for row in rounded.itertuples(index=False)]
    _write_sheet(
        sheet,
        [str(c) for c in rounded.columns],
        [[v for v, _ in row] for row in cells],
        [[f for _, f in row] for row in cells],
    )
    exact = book.create_sheet("Exact values")
    _write_sheet(
        exact,
        [str(c) for c in frame.columns],
        [[_plain_value(v) for v in row] for row in frame.itertuples(index=False)],
    )
    out = io.BytesIO()
    book.save(out)
    return out.getvalue()


def tables_xlsx(tables: Sequence[tuple[str, Sequence[str], Sequence[Sequence[str]]]]) -> bytes:
    """Several ready (already rounded) tables, one sheet each: (title, header, rows of text)."""
    from openpyxl import Workbook

    book = Workbook()
    book.remove(book.active)
    used: set[str] = set()
    for index, (title, header, rows) in enumerate(tables, start=1):
        name = _sheet_name(title or f"Table {index}", index, used)
        sheet = book.create_sheet(name)
        cells = [[_excel_value(str(v)) for v in row] for row in rows]
        _write_sheet(
            sheet,
            list(header),
            [[v for v, _ in row] for row in cells],
            [[f for _, f in row] for row in cells],
        )
    if not book.sheetnames:
        book.create_sheet("No tables")
    out = io.BytesIO()
    book.save(out)
    return out.getvalue()


def _sheet_name(title: str, index: int, used: set[str]) -> str:
    """Excel sheet names: at most 31 characters, none of []:*?/\\, unique."""
    name = re.sub(r"[\[\]:*?/\\]", " ", title).strip()[:28] or f"Table {index}"
    candidate, n = name, 2
    while candidate.lower() in used:
        candidate, n = f"{name[:26]} {n}", n + 1
    used.add(candidate.lower())
    return candidate


# --- Word ----------------------------------------------------------------------------------------


def _add_table(document, header: Sequence[str], rows: Sequence[Sequence[str]], numeric=None):
    from docx.enum.text import WD_ALIGN_PARAGRAPH
    from docx.shared import Pt

    table = document.add_table(rows=1, cols=len(header))
    table.style = "Table Grid"
    for cell, name in zip(table.rows[0].cells, header, strict=True):
        cell.text = ""
        run = cell.paragraphs[0].add_run(str(name))
        run.bold = True
        run.font.size = Pt(9)
    for r, row in enumerate(rows):
        cells = table.add_row().cells
        for c, (cell, value) in enumerate(zip(cells, row, strict=True)):
            cell.text = ""
            run = cell.paragraphs[0].add_run(str(value))
            run.font.size = Pt(9)
            if numeric is not None and numeric[r][c]:
                cell.paragraphs[0].alignment = WD_ALIGN_PARAGRAPH.RIGHT
    return table


def table_docx(frame: pd.DataFrame, title: str = "", manuscript: pd.DataFrame | None = None):
    """A .docx holding the table rounded for a manuscript, under its title."""
    from docx import Document

    rounded = manuscript if manuscript is not None else manuscript_frame(frame, title)
    document = Document()
    if title:
        document.add_heading(title, level=2)
    rows = [[str(v) for v in row] for row in rounded.itertuples(index=False)]
    numeric = [[bool(_NUMBER.match(v)) for v in row] for row in rows]
    _add_table(document, [str(c) for c in rounded.columns], rows, numeric)
    note = document.add_paragraph(ROUNDING_NOTE)
    note.runs[0].italic = True
    out = io.BytesIO()
    document.save(out)
    return out.getvalue()


# --- the report as a Word document ---------------------------------------------------------------


_SVG = re.compile(r"<svg\b.*?</svg>", re.DOTALL | re.IGNORECASE)


class _ReportReader(HTMLParser):
    """Blocks of the HTML report in order: headings, paragraphs, list items, tables, figures
    (each ``<svg>`` was swapped for ``<img data-figure="i">`` before parsing, since the parser
    lowercases the SVG's camel-case tag names)."""

    def __init__(self, figures: list[str]):
        super().__init__(convert_charrefs=True)
        self.figures = figures
        self.blocks: list[tuple] = []
        self._kind = None
        self._bold = False
        self._runs: list[tuple[str, bool]] = []
        self._table: dict | None = None
        self._cell: list[str] | None = None
        self._cell_numeric = False
        self._skip = 0

    def handle_starttag(self, tag, attrs):
        if tag in ("style", "title", "script"):
            self._skip += 1
        elif tag == "img" and dict(attrs).get("data-figure") is not None:
            self.blocks.append(("figure", self.figures[int(dict(attrs)["data-figure"])]))
        elif tag in ("h1", "h2", "h3", "p", "li", "figcaption", "caption"):
            self._kind, self._runs = tag, []
        elif tag == "strong":
            self._bold = True
        elif tag == "table":
            self._table = {"rows": [], "numeric": []}
        elif tag == "tr" and self._table is not None:
            self._table["rows"].append([])
            self._table["numeric"].append([])
        elif tag in ("td", "th") and self._table is not None:
            self._cell = []
            self._cell_numeric = dict(attrs).get("class") == "num"

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)

    def handle_endtag(self, tag):
        if tag in ("style", "title", "script"):
            self._skip -= 1
        elif tag == "strong":
            self._bold = False
        elif tag in ("td", "th") and self._cell is not None and self._table is not None:
            self._table["rows"][-1].append(" ".join("".join(self._cell).split()))
            self._table["numeric"][-1].append(self._cell_numeric)
            self._cell = None
        elif tag == "table" and self._table is not None:
            pairs = [(r, n) for r, n in zip(*self._table.values(), strict=True) if r]
            if pairs:
                rows, numeric = [r for r, _ in pairs], [n for _, n in pairs]
                self.blocks.append(("table", rows[0], rows[1:], numeric[1:]))
            self._table = None
        elif tag == self._kind:
            runs = [(t, b) for t, b in self._runs if t]
            if runs:  # no space before the first word or after the last
                runs[0] = (runs[0][0].lstrip(), runs[0][1])
                runs[-1] = (runs[-1][0].rstrip(), runs[-1][1])
            if runs and "".join(t for t, _ in runs).strip():
                self.blocks.append((self._kind, runs))
            self._kind, self._runs = None, []

    def handle_data(self, data):
        if self._skip:
            return
        if self._cell is not None:
            self._cell.append(data)
        elif self._kind is not None:
            self._runs.append((re.sub(r"\s+", " ", data), self._bold))


def report_blocks(html_text: str) -> list[tuple]:
    figures: list[str] = []

    def keep(match: re.Match) -> str:
        figures.append(match.group(0))
        return f'<img data-figure="{len(figures) - 1}">'

    reader = _ReportReader(figures)
    reader.feed(_SVG.sub(keep, html_text))
    reader.close()
    return reader.blocks


def svg_png(svg: str, scale: float = 2.0) -> bytes:
    """An inline (namespace-free) SVG of the report as a PNG."""
    import vl_convert

    if "xmlns=" not in svg[:300]:
        svg = svg.replace("<svg", '<svg xmlns="http://www.w3.org/2000/svg"', 1)
    return vl_convert.svg_to_png(svg, scale=scale)


def report_docx(html_text: str) -> bytes:
    """The HTML report as a Word document: the same headings, paragraphs, lists and tables,
    each figure as a PNG."""
    from docx import Document
    from docx.shared import Inches

    document = Document()
    for block in report_blocks(html_text):
        kind = block[0]
        if kind in ("h1", "h2", "h3"):
            document.add_heading(_joined(block[1]), level={"h1": 0, "h2": 1, "h3": 2}[kind])
        elif kind in ("p", "li", "figcaption", "caption"):
            style = "List Bullet" if kind == "li" else None
            paragraph = document.add_paragraph(style=style)
            for text, bold in block[1]:
                run = paragraph.add_run(text)
                run.bold = bold
                run.italic = kind in ("figcaption", "caption")
        elif kind == "table":
            _, header, rows, numeric = block
            width = max(len(header), *(len(r) for r in rows)) if rows else len(header)
            header = list(header) + [""] * (width - len(header))
            rows = [list(r) + [""] * (width - len(r)) for r in rows]
            numeric = [list(n) + [False] * (width - len(n)) for n in numeric]
            _add_table(document, header, rows, numeric)
            document.add_paragraph()
        elif kind == "figure":
            document.add_picture(io.BytesIO(svg_png(block[1])), width=Inches(6.3))
    out = io.BytesIO()
    document.save(out)
    return out.getvalue()


def report_xlsx(html_text: str) -> bytes:
    """Every table of the HTML report, one sheet each, named by the heading above it."""
    tables, heading, count = [], "", {}
    for block in report_blocks(html_text):
        if block[0] in ("h2", "h3"):
            heading = _joined(block[1])
        elif block[0] == "table":
            count[heading] = count.get(heading, 0) + 1
            title = heading if count[heading] == 1 else f"{heading} {count[heading]}"
            tables.append((title, block[1], block[2]))
    return tables_xlsx(tables)


def _joined(runs) -> str:
    return " ".join("".join(t for t, _ in runs).split())
