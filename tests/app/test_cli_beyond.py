"""`python -m app analyze` with the options beyond the basics, and --recipe / --report rules."""

from __future__ import annotations

import html.parser
import json
import subprocess
import sys
from pathlib import Path

from engine.analysis.run import run_analysis
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles

ROOT = Path(__file__).resolve().parents[2]
DAIRY = ROOT / "demo_data" / "dairy_herd.csv"
PUMPS = ROOT / "demo_data" / "pump_bearings.csv"
HOSTILE = "<script>alert(1)</script>"


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "app", *args], cwd=ROOT, capture_output=True, text=True, timeout=300
    )


def test_beyond_options_add_their_sections_with_the_engine_numbers(tmp_path):
    out, report = tmp_path / "out.json", tmp_path / "out.html"
    done = _run(
        "analyze", str(DAIRY), "--time", "weeks", "--unit", "weeks", "--event", "status",
        "--competing", "died=died", "--competing", f"sold={HOSTILE}", "--group", "housing",
        "--parametric", "--horizon", "400", "--landmark", "20", "--power-hr", "0.7",
        "--events", "150", "--json", str(out), "--report", str(report),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    results = json.loads(out.read_text(encoding="utf-8"))
    roles = Roles(
        time="weeks",
        unit="weeks",
        event="status",
        event_causes=(("died", "died"), ("sold", HOSTILE)),
        group="housing",
    )
    expected = run_analysis(
        prepare(read_table(DAIRY).frame, roles),
        {
            "competing": {},
            "parametric": {"horizon": 400.0},
            "landmark": {"time": 20.0},
            "sample_size": {"hazard_ratio": 0.7, "events": 150.0},
        },
    )
    for key in ("competing", "parametric", "landmark", "sample_size"):
        assert results[key] == json.loads(json.dumps(expected[key])), key
    text = report.read_text(encoding="utf-8")
    html.parser.HTMLParser().feed(text)
    assert HOSTILE not in text and "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    for heading in ("Competing risks", "Parametric models", "Sample size and power", "Landmark"):
        assert f"<h2>{heading}" in text
    assert text.count("<svg") >= 3  # Kaplan–Meier, cumulative incidence, parametric fits
    assert "http://" not in text and "https://" not in text
    assert "247" in done.stdout  # Schoenfeld's events for HR 0.7, shown in the summary too


def test_recipe_cannot_be_mixed_with_role_options(tmp_path):
    recipe = tmp_path / "r.json"
    recipe.write_text("{}", encoding="utf-8")
    done = _run("analyze", str(PUMPS), "--recipe", str(recipe), "--time", "months_in_service")
    assert done.returncode == 2
    assert done.stderr.startswith("error: --recipe brings its own") and "--time" in done.stderr


def test_report_without_a_recipe(tmp_path):
    report = tmp_path / "pumps.html"
    done = _run(
        "analyze", str(PUMPS), "--time", "months_in_service", "--event", "failed",
        "--group", "supplier", "--report", str(report),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    assert report.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert f"Report written to {report}" in done.stdout


def test_a_bad_cause_mapping_is_a_usage_error():
    done = _run("analyze", str(DAIRY), "--time", "weeks", "--competing", "died")
    assert done.returncode == 2 and "VALUE=CAUSE" in done.stderr


def test_an_unwritable_report_is_exit_2(tmp_path):
    done = _run(
        "analyze", str(PUMPS), "--time", "months_in_service", "--event", "failed",
        "--report", str(tmp_path / "no" / "such" / "dir" / "r.html"),
    )  # fmt: skip
    assert done.returncode == 2 and done.stderr.startswith("error: cannot write")
