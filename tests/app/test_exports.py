"""Downloads: CSV cells that a spreadsheet would run as formulas are neutralised (OWASP, "CSV
Injection"), numbers stay numbers; figures export as real PNG and SVG."""

from __future__ import annotations

import io

import pandas as pd
import pytest

from app import charts, exports


@pytest.mark.parametrize(
    ("cell", "expected"),
    [
        ("=1+1", "'=1+1"),
        ("+SUM(A1)", "'+SUM(A1)"),
        ("-2+3", "'-2+3"),
        ("@cmd", "'@cmd"),
        ("\tx", "'\tx"),
        ("\rx", "'\rx"),
        ("plain", "plain"),
        ("a=b", "a=b"),
        ("", ""),
    ],
)
def test_text_cells_that_start_a_formula_are_neutralised(cell, expected):
    assert exports.safe_cell(cell) == expected


def test_numbers_are_untouched_in_the_csv():
    frame = pd.DataFrame({"group": ["=evil()", "ok"], "hr": [-0.25, 1.5], "n": [-3, 4]})
    text = exports.table_csv(frame).decode("utf-8")
    back = pd.read_csv(io.StringIO(text))
    assert back["hr"].tolist() == [-0.25, 1.5]
    assert back["n"].tolist() == [-3, 4]
    assert back["group"].tolist() == ["'=evil()", "ok"]


def test_column_names_are_neutralised_too():
    text = exports.table_csv(pd.DataFrame({"=cmd": [1]})).decode("utf-8")
    assert text.splitlines()[0] == "'=cmd"


def test_exact_values_are_kept():
    frame = pd.DataFrame({"survival": [0.123456789012345]})
    back = pd.read_csv(io.BytesIO(exports.table_csv(frame)))
    assert back["survival"].iloc[0] == 0.123456789012345


def _figure():
    data = pd.DataFrame(
        {
            "group": ["A"] * 3,
            "time": [0.0, 1.0, 2.0],
            "estimate": [1.0, 0.8, 0.5],
            "lower": [1.0, 0.7, 0.4],
            "upper": [1.0, 0.9, 0.6],
            "at_risk": [5, 4, 2],
        }
    )
    chart = charts.step_curve_chart(data, charts.ChartStyle(), charts.group_colours(["A"]))
    return charts.finish(chart, charts.ChartStyle())


def test_png_and_svg_exports_are_real_images():
    spec = _figure()
    png = exports.figure_png(spec)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    svg = exports.figure_svg(spec)
    assert svg.lstrip().startswith("<svg") and "</svg>" in svg


def test_file_stem_from_a_typed_title():
    assert exports.file_stem("Survival by arm <script>") == "survival-by-arm-script"
    assert exports.file_stem("***") == "hazel"


def test_long_labels_with_characters_beyond_the_basic_plane_are_drawn():
    """Issue 10 (the large fuzz run): the image renderer cuts a long legend or table label
    between the two halves of a character beyond U+FFFF (an emoji, a rare script) and then
    fails; such characters reach it as codes. Failed for 13 of 14 label lengths before."""
    import numpy as np

    from app.batch import curve_figure
    from engine.analysis.run import ANALYSIS_DEFAULTS
    from engine.prepare.checks import prepare
    from engine.prepare.roles import Roles

    rng = np.random.default_rng(0)
    labels = ["ward 😀𴕳" * 20, "ward 😀𴕳" * 20 + "x", "b"]
    frame = pd.DataFrame(
        {
            "t": rng.integers(1, 8, 30),
            "e": rng.integers(0, 2, 30),
            "g": [labels[i % 3] for i in range(30)],
        }
    )
    prepared = prepare(frame, Roles(time="t", event="e", group="g"))
    settings = {k: dict(ANALYSIS_DEFAULTS[k]) for k in ("curves", "comparison", "cox")}
    svg = exports.figure_svg(curve_figure(prepared, settings))
    assert svg.startswith("<svg") and "[U+1F600]" in svg
