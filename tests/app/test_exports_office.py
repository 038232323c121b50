"""Excel sheets and Word tables rounded by the manuscript rules, and the report as one Word
document with its figures (checked by reading the files back with openpyxl and python-docx)."""

from __future__ import annotations

import io
import re
import subprocess
import sys
from pathlib import Path

import docx
import numpy as np
import openpyxl
import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

from app import exports_office
from engine.analysis.manuscript_tables import column_kinds, manuscript_frame, plain_header

ROOT = Path(__file__).resolve().parents[2]
ENTRY = str(ROOT / "app" / "hazel.py")

COX = pd.DataFrame(
    {
        "variable": ["load_kN", "lubricant", "=HYPERLINK(1)"],
        "level": [None, "dry film", "x"],
        "coef": [0.0512345, 0.49876, -1.2],
        "se": [0.0101, 0.1049, 0.5],
        "hazard_ratio": [1.052558, 1.6466, 0.0456],
        "lower": [1.031, 1.3405, 0.01234],
        "upper": [1.0735, 2.0225, 0.0999],
        "p_value": [3.1e-7, 0.0125, 0.99951],
        "n": [1500, 1500, 1500],
    }
)
CURVES = pd.DataFrame(
    {
        "group": ["all", "a"],
        "n": [120, 60],
        "median": [23.04999, None],
        "median_lower": [16.0, 12.25],
        "median_upper": [None, None],
        "survival_12": [0.64321, 0.5],
        "survival_12_lower": [0.55149, 0.40001],
        "survival_12_upper": [0.72049, 0.6],
        "df": [1.0, 2.0],
        "statistic": [16.7934, 3.14159],
    }
)


def test_columns_are_rounded_by_the_manuscript_rules():
    cox = manuscript_frame(COX)
    assert list(cox.columns) == [
        "Variable", "Level", "Coefficient", "Standard error", "Hazard ratio", "Lower limit",
        "Upper limit", "p", "n",
    ]  # fmt: skip
    assert cox["Hazard ratio"].tolist() == ["1.05", "1.65", "0.046"]  # 2 sig. figures < 0.1
    assert cox["Lower limit"].tolist() == ["1.03", "1.34", "0.012"]  # limits beside a ratio
    assert cox["Upper limit"].tolist() == ["1.07", "2.02", "0.10"]  # 0.0999 rounds into 2 decimals
    assert cox["p"].tolist() == ["< 0.001", "0.013", "> 0.999"]  # 0.0125 half up
    assert cox["Coefficient"].tolist() == ["0.05", "0.50", "-1.20"]
    assert cox["n"].tolist() == ["1500"] * 3
    assert cox["Level"].tolist() == ["", "dry film", "x"]
    curves = manuscript_frame(CURVES)
    assert curves["Median"].tolist() == ["23.0", "not reached"]
    assert curves["Median, upper limit"].tolist() == ["not reached", "not reached"]
    assert curves["Survival at 12"].tolist() == ["64.3%", "50.0%"]
    assert curves["Survival at 12, lower limit"].tolist() == ["55.1%", "40.0%"]
    assert curves["Degrees of freedom"].tolist() == ["1", "2"]
    assert curves["Statistic"].tolist() == ["16.79", "3.14"]


def test_interval_limits_follow_the_table_they_are_in():
    vertices = pd.DataFrame({"time": [0.0, 1.5], "estimate": [1.0, 0.9], "lower": [1.0, 0.81]})
    assert column_kinds(vertices, "survival-curve-values")["estimate"] == "percent"
    assert column_kinds(vertices, "hazard-curve-values")["estimate"] == "statistic"
    assert column_kinds(vertices, "rmst-by-group")["lower"] == "time"
    assert plain_header("p_value") == "p" and plain_header("at_risk") == "At risk"
    assert plain_header("Already plain") == "Already plain"


def test_excel_sheet_keeps_numbers_as_rounded_numbers_and_text_never_as_formula():
    book = openpyxl.load_workbook(io.BytesIO(exports_office.table_xlsx(COX, "Cox")))
    assert book.sheetnames == ["Table", "Exact values"]
    table = book["Table"]
    header = [c.value for c in table[1]]
    column = {name: i for i, name in enumerate(header)}
    row = [c for c in table[3]]
    assert row[column["Hazard ratio"]].value == 1.65
    assert row[column["Hazard ratio"]].number_format == "0.00"
    assert row[column["p"]].value == 0.013 and row[column["p"]].number_format == "0.000"
    assert table[2][column["p"]].value == "< 0.001"
    injected = table[4][column["Variable"]]
    assert injected.value == "=HYPERLINK(1)" and injected.data_type == "s"
    assert all(c.data_type != "f" for r in book["Table"].iter_rows() for c in r)
    assert all(c.data_type != "f" for r in book["Exact values"].iter_rows() for c in r)
    exact = book["Exact values"]
    assert exact[2][[c.value for c in exact[1]].index("coef")].value == 0.0512345


def test_percentages_in_excel_are_fractions_shown_as_percent():
    book = openpyxl.load_workbook(io.BytesIO(exports_office.table_xlsx(CURVES, "Curves")))
    table = book["Table"]
    header = [c.value for c in table[1]]
    cell = table[2][header.index("Survival at 12")]
    assert cell.value == pytest.approx(0.643) and cell.number_format == "0.0%"
    assert table[3][header.index("Median")].value == "not reached"


def test_word_table_holds_the_rounded_cells():
    document = docx.Document(io.BytesIO(exports_office.table_docx(COX, "Cox model")))
    assert document.paragraphs[0].text == "Cox model"
    (table,) = document.tables
    cells = [[c.text for c in row.cells] for row in table.rows]
    expected = manuscript_frame(COX)
    assert cells[0] == list(expected.columns)
    assert cells[1:] == expected.astype(str).values.tolist()


@pytest.fixture(scope="module")
def report_html(tmp_path_factory) -> str:
    out = tmp_path_factory.mktemp("office") / "r.html"
    done = subprocess.run(
        [
            sys.executable, "-m", "app", "analyze", str(ROOT / "demo_data" / "pump_bearings.csv"),
            "--time", "months_in_service", "--unit", "months", "--event", "failed",
            "--group", "supplier", "--covariates", "load_kN,lubricant", "--baseline",
            "--times", "12,24", "--report", str(out),
        ],
        cwd=ROOT, capture_output=True, text=True, timeout=300,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    return out.read_text(encoding="utf-8")


def test_report_docx_has_every_heading_table_and_figure(report_html):
    document = docx.Document(io.BytesIO(exports_office.report_docx(report_html)))
    headings = [
        p.text for p in document.paragraphs if p.style.name.startswith(("Heading", "Title"))
    ]
    html_headings = [
        " ".join(re.sub(r"<[^>]+>", "", h).split())
        for h in re.findall(r"<h[123][^>]*>(.*?)</h[123]>", report_html, re.S)
    ]
    assert headings == [h.replace("&amp;", "&") for h in html_headings]
    assert len(document.tables) == report_html.count("<table")
    assert len(document.inline_shapes) == report_html.count("<svg")
    assert len(document.inline_shapes) >= 2  # the Kaplan–Meier figure and the forest plot
    text = "\n".join(p.text for p in document.paragraphs)
    assert "not decisions about an individual patient" in text
    baseline = next(t for t in document.tables if t.rows[0].cells[0].text == "Variable")
    assert baseline.rows[0].cells[2].text.startswith("All rows (n = ")


def test_report_xlsx_has_a_sheet_per_table(report_html):
    book = openpyxl.load_workbook(io.BytesIO(exports_office.report_xlsx(report_html)))
    assert len(book.sheetnames) == report_html.count("<table")
    assert any(name.startswith("Baseline table") for name in book.sheetnames)
    assert all(len(name) <= 31 for name in book.sheetnames)


def test_cli_writes_the_report_as_docx_and_xlsx(tmp_path):
    for suffix in ("docx", "xlsx"):
        out = tmp_path / f"r.{suffix}"
        done = subprocess.run(
            [
                sys.executable, "-m", "app", "analyze",
                str(ROOT / "demo_data" / "pump_bearings.csv"), "--time", "months_in_service",
                "--event", "failed", "--group", "supplier", "--report", str(out),
            ],
            cwd=ROOT, capture_output=True, text=True, timeout=300,
        )  # fmt: skip
        assert done.returncode == 0, done.stderr
        assert out.read_bytes()[:2] == b"PK"
    assert docx.Document(str(tmp_path / "r.docx")).tables
    assert openpyxl.load_workbook(tmp_path / "r.xlsx").sheetnames


def test_every_table_on_a_page_offers_excel_and_word():
    at = AppTest.from_file(ENTRY, default_timeout=120).run()
    at.switch_page("views/curves.py").run()
    assert not at.exception
    labels = [b.proto.label for b in at.get("download_button")]
    tables = len(at.dataframe)
    assert labels.count("CSV") == tables
    assert labels.count("Excel") == tables and labels.count("Word") == tables


def test_numbers_survive_the_round_trip_through_excel():
    frame = pd.DataFrame({"time": np.array([1.25, 2.35]), "p_value": [0.04449, 0.5]})
    book = openpyxl.load_workbook(io.BytesIO(exports_office.table_xlsx(frame, "t")))
    values = [[c.value for c in row] for row in book["Table"].iter_rows(min_row=2)]
    assert values == [[1.3, 0.044], [2.4, 0.5]]  # half up on the printed decimal


# --- issue: downloads that rounded information away ---------------------------------------------


def _prepared_file(tmp_path, n: int = 400, seed: int = 23):
    """A file of its own: two arms, most subjects followed until the event (medians reached),
    and a covariate on a large scale (so its coefficient and SE are tiny)."""
    from engine.io.tables import read_table
    from engine.prepare.checks import prepare
    from engine.prepare.roles import suggest_roles

    rng = np.random.default_rng(seed)
    arm = rng.choice(["a", "b"], n)
    months = np.round(rng.exponential(np.where(arm == "a", 30, 45)), 2) + 0.01
    frame = pd.DataFrame(
        {
            "months": months,
            "died": (rng.random(n) < 0.85).astype(int),
            "arm": arm,
            "income": np.round(rng.normal(40_000, 9_000, n)),
        }
    )
    path = tmp_path / "clinic.csv"
    frame.to_csv(path, index=False)
    table = read_table(path)
    roles = suggest_roles(table.frame).to_roles(
        time="months", event="died", event_values=(1,), group="arm", covariates=("income",)
    )
    return path, prepare(table.frame, roles)


def test_curve_summary_notes_a_missing_median_only_where_one_is_missing(tmp_path):
    from engine.survival.summary import group_summary

    _, prepared = _prepared_file(tmp_path)
    frame = group_summary(prepared.frame, times=(12,)).to_frame()
    assert frame["median"].notna().all() and frame["median_reason"].isna().all()
    document = docx.Document(io.BytesIO(exports_office.table_docx(frame, "Curve summary")))
    header, *rows = [[c.text for c in row.cells] for row in document.tables[0].rows]
    note = header.index("Median, note")
    assert [r[note] for r in rows] == [""] * len(frame)
    assert all(float(r[header.index("Median")]) > 0 for r in rows)
    assert "Survival at 12" in header and "Restricted mean, lower limit" in header
    book = openpyxl.load_workbook(io.BytesIO(exports_office.table_xlsx(frame, "Curve summary")))
    sheet = book["Table"]
    names = [c.value for c in sheet[1]]
    assert all(sheet.cell(r, names.index("Median, note") + 1).value is None for r in (2, 3, 4))
    # where the median is not reached, the note says why
    late = frame.assign(median=[None] * len(frame), median_reason=["not reached: x"] * len(frame))
    assert set(manuscript_frame(late)["Median, note"]) == {"not reached: x"}
    assert set(manuscript_frame(late)["Median"]) == {"not reached"}


def test_cox_download_keeps_small_values_and_words_its_headers(tmp_path):
    from engine.cox.fit import fit_cox

    _, prepared = _prepared_file(tmp_path)
    terms = fit_cox(prepared.frame, ["income"], variance="robust").to_frame()
    se = float(terms["se"].iloc[0])
    assert 0 < se < 0.005  # would have been written "0.00"
    document = docx.Document(io.BytesIO(exports_office.table_docx(terms, "Cox model")))
    header, row = [[c.text for c in r.cells] for r in document.tables[0].rows]
    for words in ("Coefficient", "Standard error", "Standard error (model-based)", "Wald z"):
        assert words in header, header
    assert not {"Coef", "SE", "Se model", "Z"} & set(header)
    shown = row[header.index("Standard error")]
    assert float(shown) != 0 and abs(float(shown) - se) / se < 0.05  # 2 significant figures
    assert float(row[header.index("Coefficient")]) != 0
    book = openpyxl.load_workbook(io.BytesIO(exports_office.table_xlsx(terms, "Cox model")))
    sheet = book["Table"]
    cell = sheet.cell(2, [c.value for c in sheet[1]].index("Standard error") + 1)
    assert isinstance(cell.value, float) and cell.value == pytest.approx(se, rel=0.05)
    assert cell.number_format.startswith("0.00")  # formatted, never text


def test_report_workbook_stores_every_count_as_a_number(tmp_path):
    path, _ = _prepared_file(tmp_path, n=2400)
    out = tmp_path / "report.xlsx"
    done = subprocess.run(
        [
            sys.executable, "-m", "app", "analyze", str(path), "--time", "months", "--event",
            "died", "--event-value", "1", "--group", "arm", "--covariates", "income",
            "--report", str(out),
        ],
        cwd=ROOT, capture_output=True, text=True, timeout=300,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    book = openpyxl.load_workbook(out)
    numbers_as_text = [
        (sheet.title, c.coordinate, c.value)
        for sheet in book
        for row in sheet.iter_rows()
        for c in row
        if isinstance(c.value, str) and re.fullmatch(r"[-−]?[\d,]+(\.\d+)?%?", c.value)
    ]
    assert not numbers_as_text
    counts = [c for sheet in book for row in sheet.iter_rows() for c in row if c.value == 2400]
    assert counts and all(c.number_format == "#,##0" for c in counts)
    # the income coefficient's SE (about 1e-5) stays a non-zero number, not "0.000"
    cox = next(s for s in book if s.title.startswith("Cox"))
    header = [c.value for c in cox[1]]
    se = cox.cell(2, header.index("Standard error") + 1).value
    assert isinstance(se, float) and 0 < se < 1e-3


@pytest.mark.parametrize(
    ("key", "words"),
    [("rmst_lower", "Restricted mean, lower limit"), ("se_model", "Standard error (model-based)"),
     ("survival_2.5_upper", "Survival at 2.5, upper limit"), ("p_bh", "p (Benjamini–Hochberg)"),
     ("n_at_risk", "At risk"), ("median_reason", "Median, note"), ("z", "Wald z"),
     ("univariable_lr_p_value", "Univariable likelihood-ratio p"), ("n", "n"),
     ("Age (years)", "Age (years)"), ("load_kN", "load_kN")],
)  # fmt: skip
def test_result_keys_become_hazels_words(key, words):
    assert plain_header(key) == words
