"""`python -m app analyze` with --fine-gray and --performance: JSON sections and bad input."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from engine.analysis.run import run_analysis
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles

ROOT = Path(__file__).resolve().parents[2]
DAIRY = ROOT / "demo_data" / "dairy_herd.csv"
BASE = (
    "analyze", str(DAIRY), "--time", "weeks", "--unit", "weeks", "--event", "status",
    "--covariates", "first_calving_age_months,farm",
)  # fmt: skip
CAUSES = ("--competing", "died=died", "--competing", "sold=sold")
DIED = ("--event-value", "died")


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "app", *args], cwd=ROOT, capture_output=True, text=True, timeout=300
    )


def test_sections_hold_the_engine_numbers(tmp_path):
    out = tmp_path / "out.json"
    done = _run(
        *BASE, *CAUSES, "--group", "housing", "--fine-gray", "died", "--times", "52,104",
        "--performance", "50,100", "--calibration-time", "100", "--bootstrap", "4", "--seed", "3",
        "--json", str(out),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    results = json.loads(out.read_text(encoding="utf-8"))
    roles = Roles(
        time="weeks",
        unit="weeks",
        event="status",
        event_causes=(("died", "died"), ("sold", "sold")),
        group="housing",
        covariates=("first_calving_age_months", "farm"),
    )
    expected = run_analysis(
        prepare(read_table(DAIRY).frame, roles),
        {
            "curves": {"times": [52.0, 104.0]},
            "competing": {"times": [52.0, 104.0], "fine_gray": "died"},
            "performance": {
                "times": [50.0, 100.0],
                "calibration_time": 100.0,
                "replicates": 4,
                "seed": 3,
            },
        },
    )
    for key in ("competing", "performance"):
        assert results[key] == json.loads(json.dumps(expected[key])), key
    gray = results["competing"]["gray_test"]
    assert [row["cause"] for row in gray] == ["died", "sold"]
    assert all(set(row) == {"cause", "statistic", "df", "p_value"} for row in gray)
    fine_gray = results["competing"]["fine_gray"]
    assert {"cause", "n", "events", "terms"} <= set(fine_gray) and fine_gray["cause"] == "died"
    assert len(fine_gray["typical_at_times"]) == 2
    performance = results["performance"]
    assert performance["times"] == [50.0, 100.0] and len(performance["auc"]) == 2
    assert performance["optimism"]["replicates"] == 4 and performance["optimism"]["seed"] == 3
    assert performance["calibration_time"] == 100.0 and len(performance["calibration"]) == 5
    assert "Fine–Gray model of died" in _run(*BASE, *CAUSES, "--fine-gray", "died").stdout


@pytest.mark.parametrize(
    "extra, message",
    [
        ((*DIED, "--fine-gray", "died"), "--fine-gray needs causes"),
        ((*DIED, "--performance", "fifty"), "--performance expects numbers"),
        ((*DIED, "--performance", "50", "--bootstrap", "-1"), "--bootstrap must be a whole"),
        ((*DIED, "--performance", "50", "--risk-groups", "1"), "--risk-groups must be a whole"),
    ],
    ids=[
        "no causes",
        "not a number",
        "bootstrap",
        "groups",
    ],
)
def test_bad_options_exit_2_with_one_line(extra, message):
    done = _run(*BASE, *extra)
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and message in lines[0]


@pytest.mark.parametrize(
    "extra, section, part, message",
    [
        ((*CAUSES, "--fine-gray", "stroke"), "competing", "fine_gray", "'stroke'"),
        ((*DIED, "--performance", "50,1e6"), "performance", None, "outside the follow-up"),
    ],
    ids=["unknown cause", "time past follow-up"],
)
def test_a_part_the_data_do_not_allow_says_why_in_its_section(
    tmp_path, extra, section, part, message
):
    """Issue 10 item 12: the reason is in the section; every other section is still there."""
    out = tmp_path / "out.json"
    done = _run(*BASE, *extra, "--json", str(out))
    assert done.returncode == 0, done.stderr
    results = json.loads(out.read_text(encoding="utf-8"))
    found = results[section] if part is None else results[section][part]
    assert message in found["not_computed"]
    assert results["cox"]["terms"] and results["curves"][0]["n"]
    assert "not computed" in done.stdout and message in done.stdout


def test_performance_needs_covariates(tmp_path):
    out = tmp_path / "out.json"
    done = _run(
        "analyze", str(DAIRY), "--time", "weeks", "--event", "status", *DIED, "--performance", "50",
        "--json", str(out),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    performance = json.loads(out.read_text(encoding="utf-8"))["performance"]
    assert "needs covariates" in performance["not_computed"]


def test_report_has_the_sections_with_the_json_numbers(tmp_path):
    import html.parser

    hostile = "<b>sold</b>"
    out, report = tmp_path / "out.json", tmp_path / "out.html"
    done = _run(
        *BASE, "--competing", "died=died", "--competing", f"sold={hostile}", "--group", "housing",
        "--fine-gray", hostile, "--performance", "50,100", "--bootstrap", "3",
        "--json", str(out), "--report", str(report),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    results = json.loads(out.read_text(encoding="utf-8"))
    text = report.read_text(encoding="utf-8")
    html.parser.HTMLParser().feed(text)
    assert hostile not in text and "Fine–Gray model: &lt;b&gt;sold&lt;/b&gt;" in text
    assert "<h3>Gray's test of equal cumulative incidence across groups</h3>" in text
    assert "<h2>Prediction performance of the Cox model</h2>" in text
    first = results["competing"]["fine_gray"]["terms"][0]
    assert f'data-value="{first["coef"]!r}"' in text
    assert f'data-value="{results["performance"]["auc"][0]!r}"' in text
    assert text.count("<svg") >= 4  # curves, incidence, Fine–Gray forest, calibration
