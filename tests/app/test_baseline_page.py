"""The baseline table on its page (AppTest), in the recipe, on the command line and in the
report, checked against pandas on the rows the analyses use."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from streamlit.testing.v1 import AppTest

from app import share_section
from engine.analysis.baseline import ROW_KEYS, TEST_CAUTION
from engine.analysis.recipe import Recipe
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles
from engine.wording import format_number, format_percent

ROOT = Path(__file__).resolve().parents[2]
ENTRY = str(ROOT / "app" / "hazel.py")
PUMPS_PATH = ROOT / "demo_data" / "pump_bearings.csv"
PUMPS = read_table(PUMPS_PATH).frame
ROLE_OPTIONS = (
    "--time", "months_in_service", "--unit", "months", "--event", "failed", "--group",
    "supplier", "--covariates", "load_kN,temperature_C,lubricant", "--categorical", "lubricant",
)  # fmt: skip


def run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "app", *args], cwd=ROOT, capture_output=True, text=True, timeout=180
    )


@pytest.fixture(scope="module")
def used():
    """The rows the analyses use on the demo, as read."""
    roles = Roles(time="months_in_service", unit="months", event="failed", group="supplier")
    prepared = prepare(PUMPS, roles)
    return PUMPS.loc[prepared.frame.index]


def _page() -> AppTest:
    at = AppTest.from_file(ENTRY, default_timeout=120).run()
    at.switch_page("views/baseline.py").run()
    assert not at.exception, [e.message for e in at.exception]
    return at


def _shown(at: AppTest):
    return next(d.value for d in at.dataframe if "Variable" in d.value.columns)


def test_page_shows_the_numbers_pandas_gives(used):
    at = _page()
    shown = _shown(at)
    assert shown.columns[2] == f"All rows (n = {len(used):,})"
    ashford = used[used["supplier"] == "Ashford"]
    title = f"Ashford (n = {len(ashford):,})"
    load = shown[(shown["Variable"] == "load_kN") & (shown["Level"] == "median (quartiles)")]
    values = ashford["load_kN"].dropna()
    assert load.iloc[0][title] == (
        f"{format_number(values.median())} ({format_number(values.quantile(0.25))} to "
        f"{format_number(values.quantile(0.75))})"
    )
    oil = shown[(shown["Variable"] == "lubricant") & (shown["Level"] == "oil bath")].iloc[0]
    known = ashford["lubricant"].dropna()
    count = int((known == "oil bath").sum())
    assert oil[title] == f"{count} ({format_percent(count / len(known))})"
    missing = shown[(shown["Variable"] == "load_kN") & (shown["Level"] == "missing")].iloc[0]
    assert missing[title] == str(int(ashford["load_kN"].isna().sum()))


def test_choices_change_the_table_and_the_caution_shows_for_tests(used):
    at = _page()
    at.segmented_control(key="baseline_summary").set_value("Mean (SD)").run()
    shown = _shown(at)
    row = shown[(shown["Variable"] == "load_kN") & (shown["Level"] == "mean (SD)")].iloc[0]
    values = used["load_kN"].dropna()
    expected = f"{format_number(values.mean())} ({format_number(values.std())})"
    assert row[shown.columns[2]] == expected
    at.selectbox(key="baseline_compare").set_value("A test per variable").run()
    assert not at.exception
    assert any(TEST_CAUTION in w.value for w in at.warning)
    assert {"Test", "p"} <= set(_shown(at).columns)
    at.selectbox(key="baseline_compare").set_value("Standardised differences").run()
    columns = _shown(at).columns
    assert any(c.startswith("Standardised difference, Brightmoor vs Ashford") for c in columns)
    at.selectbox(key="baseline_group").set_value(share_section.BASELINE_ALL_ROWS).run()
    assert not at.exception
    assert any("compare groups" in e.value for e in at.error)  # a message, not a crash
    at.selectbox(key="baseline_compare").set_value("Nothing more").run()
    assert list(_shown(at).columns) == ["Variable", "Level", f"All rows (n = {len(used):,})"]


def test_the_recipe_keeps_and_restores_the_page(used):
    at = _page()
    at.segmented_control(key="baseline_summary").set_value("Mean (SD)").run()
    at.multiselect(key="baseline_variables").set_value(["lubricant", "load_kN"]).run()
    recipe = share_section.recipe_from_session(at.session_state)
    chosen = recipe.settings()["baseline"]
    assert chosen["summary"] == "mean"
    assert chosen["variables"] == ["lubricant", "load_kN"]
    assert chosen["group"] == "supplier"
    again = Recipe.from_json(recipe.to_json())
    fresh = AppTest.from_file(ENTRY, default_timeout=120).run()
    share_section.restore_recipe(fresh.session_state, again)
    fresh.switch_page("views/baseline.py").run()
    assert not fresh.exception
    assert fresh.segmented_control(key="baseline_summary").value == "Mean (SD)"
    assert fresh.multiselect(key="baseline_variables").value == ["lubricant", "load_kN"]


def test_cli_json_rows_as_documented(used):
    done = run("analyze", str(PUMPS_PATH), *ROLE_OPTIONS, "--baseline", "--json", "-")
    assert done.returncode == 0, done.stderr
    baseline = json.loads(done.stdout)["baseline"]
    assert set(baseline) == {"group", "rows"} and baseline["group"] == "supplier"
    assert all(tuple(r) == ROW_KEYS for r in baseline["rows"])
    temperature = next(
        r for r in baseline["rows"] if r["variable"] == "temperature_C" and r["group"] is None
    )
    values = used["temperature_C"].dropna()
    assert temperature["median"] == values.median()
    assert temperature["q1"] == values.quantile(0.25)
    assert temperature["sd"] == pytest.approx(values.std(), rel=1e-14)
    assert temperature["missing"] == int(used["temperature_C"].isna().sum())


def test_cli_options_and_errors(tmp_path):
    done = run(
        "analyze", str(PUMPS_PATH), *ROLE_OPTIONS, "--baseline-group", "none",
        "--baseline-variables", "site", "--json", "-",
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    baseline = json.loads(done.stdout)["baseline"]
    assert baseline["group"] is None
    assert {r["level"] for r in baseline["rows"]} == set(PUMPS["site"].dropna())
    bad = run("analyze", str(PUMPS_PATH), *ROLE_OPTIONS, "--baseline-variables", "nope")
    assert bad.returncode == 2 and bad.stderr.startswith("error: ") and "nope" in bad.stderr
    report = tmp_path / "r.html"
    done = run(
        "analyze", str(PUMPS_PATH), *ROLE_OPTIONS, "--baseline-compare", "smd",
        "--report", str(report),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    html = report.read_text(encoding="utf-8")
    assert "<h2>Baseline table by supplier</h2>" in html
    assert "Standardised difference, Brightmoor vs Ashford" in html
