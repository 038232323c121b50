"""Figure and table downloads: PNG and SVG through vl-convert, CSV safe to open in a spreadsheet.

Nothing here touches streamlit, so the same functions serve the app, tests and later the report.
"""

from __future__ import annotations

import json
import re
import unicodedata

import altair as alt
import pandas as pd
import vl_convert

from engine.text_safety import visible_text

# OWASP, "CSV Injection": a spreadsheet treats a cell beginning with one of these as a formula.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_FORMULA_SIGNS = frozenset("=+-@")


def safe_cell(value: object) -> object:
    """A text cell that cannot run as a formula; every other value unchanged.

    Text beginning with = + - @ tab or carriage return gets a leading apostrophe, as OWASP advises,
    so it shows as the text it is. So does text whose first visible character is one of those
    signs after blanks or invisible characters (spaces, a no-break or zero-width space, a
    byte-order mark), or is a fullwidth or small form of them (＝, ﹦, ＋, －, ＠): some
    spreadsheets skip the first and read the second as the plain sign. Numbers (including
    negative ones) are never text here, so they stay numbers.
    """
    if isinstance(value, str) and (value.startswith(_FORMULA_START) or _hidden_formula(value)):
        return "'" + value
    return value


def _hidden_formula(text: str) -> bool:
    for char in text:
        if char.isspace() or unicodedata.category(char) == "Cf":  # blanks, zero-width, BOM
            continue
        return unicodedata.normalize("NFKC", char) in _FORMULA_SIGNS
    return False


def table_csv(frame: pd.DataFrame) -> bytes:
    """UTF-8 CSV of a table with text cells and column names neutralised; numbers exact."""
    out = frame.copy()
    out.columns = [safe_cell(str(c)) for c in out.columns]
    for column in out.columns:
        series = out[column]
        if not (pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series)):
            out[column] = series.map(safe_cell)
    # CRLF rows: the csv writer then quotes a cell holding a bare CR, which a spreadsheet
    # would otherwise read as the end of a row (splitting a neutralised cell from its quote).
    return out.to_csv(index=False, lineterminator="\r\n").encode("utf-8")


# What the SVG renderer cannot take and aborts the whole process on: characters XML 1.0 forbids
# (control characters are shown as codes, the rest as U+FFFD) and whole numbers past 2**53.
_ASTRAL = re.compile("[\U00010000-\U0010ffff]")
_NOT_XML = re.compile("[\ud800-\udfff\ufffe\uffff]")


def json_spec(figure: alt.TopLevelMixin | dict) -> dict:
    """A Vega-Lite spec with every dataset as JSON rows (missing values as null), safe for the
    renderer whichever way it was built."""
    if not isinstance(figure, dict):
        return _renderer_safe(figure.to_dict())
    datasets = {
        name: json.loads(rows.to_json(orient="records")) if isinstance(rows, pd.DataFrame) else rows
        for name, rows in figure.get("datasets", {}).items()
    }
    return _renderer_safe({**figure, "datasets": datasets})


def _renderer_safe(value):
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) > 2**53:
        return float(value)
    if isinstance(value, str):
        text = _NOT_XML.sub("\ufffd", visible_text(value))
        # the renderer cuts long labels between UTF-16 code units and then fails on the half
        # of a character beyond U+FFFF it made, so those characters are shown as codes here
        return _ASTRAL.sub(lambda m: f"[U+{ord(m.group()):X}]", text)
    if isinstance(value, dict):
        return {_renderer_safe(k): _renderer_safe(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_renderer_safe(v) for v in value]
    return value


def figure_svg(figure: alt.TopLevelMixin | dict) -> str:
    """A chart (or its Vega-Lite spec) as a standalone SVG document."""
    return vl_convert.vegalite_to_svg(json_spec(figure))


def figure_png(figure: alt.TopLevelMixin | dict, scale: float = 2.0) -> bytes:
    """The chart as a PNG at ``scale`` times its on-screen size (2 = sharp on slides and paper)."""
    return vl_convert.vegalite_to_png(json_spec(figure), scale=scale)


def file_stem(title: str, fallback: str = "hazel") -> str:
    """A file name from a title the user may have typed: letters, digits, dashes only."""
    stem = re.sub(r"[^A-Za-z0-9]+", "-", title).strip("-").lower()
    return stem[:60] or fallback
