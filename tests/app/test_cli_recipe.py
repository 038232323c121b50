"""`python -m app analyze DATA --recipe R --json OUT --report OUT.html`, end to end.

App state -> recipe -> command line -> the same numbers the app computes from that state. These
tests skip (saying why) until ``analyze`` exists in ``app.cli``; once it does they must pass.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from app import state
from app.share_section import recipe_from_session
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.survival.summary import comparison_json, curves_json
from tests.app.demo_files import PUMP_ROLES, PUMPS, ROOT

ROLES = PUMP_ROLES


def _has_analyze() -> bool:
    from app.cli import build_parser

    try:
        build_parser().parse_args(["analyze", "x.csv"])
    except ValueError:  # the parser's usage error: no such command
        return False
    return True


pytestmark = pytest.mark.skipif(
    not _has_analyze(), reason="`analyze` is not in app.cli yet (the lead adds it after merging)"
)


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "app", *args], cwd=ROOT, capture_output=True, text=True, timeout=300
    )


def test_recipe_replay_gives_the_app_numbers_and_a_report(tmp_path):
    table = read_table(PUMPS)
    session = {
        state.TABLE: table,
        state.ROLES: ROLES,
        "curves_conf": "90%",
        "curves_transform": "log",
        "curves_times": "12, 24",
        "compare_test": "tarone-ware",
    }
    recipe = recipe_from_session(session)
    recipe_path = tmp_path / "pumps.recipe.json"
    recipe_path.write_text(recipe.to_json(), encoding="utf-8")
    out_json, out_html = tmp_path / "out.json", tmp_path / "out.html"

    done = _run(
        "analyze", str(PUMPS), "--recipe", str(recipe_path), "--json", str(out_json),
        "--report", str(out_html),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    results = json.loads(out_json.read_text(encoding="utf-8"))

    # what the app shows for the same state
    prepared = prepare(table.frame, ROLES)
    assert results["data"] == prepared.report.to_dict()
    assert results["curves"] == curves_json(prepared.frame, [12.0, 24.0], 0.9, "log")
    assert results["comparison"] == comparison_json(prepared.frame, "tarone-ware")
    assert results["cox"] is not None

    report = out_html.read_text(encoding="utf-8")
    assert report.startswith("<!DOCTYPE html>")
    assert "http://" not in report and "https://" not in report
    assert "Tarone–Ware" in report and "90% confidence intervals" in report


def test_recipe_on_another_file_warns_on_stderr_and_runs(tmp_path):
    table = read_table(PUMPS)
    recipe = recipe_from_session({state.TABLE: table, state.ROLES: ROLES})
    recipe_path = tmp_path / "pumps.recipe.json"
    recipe_path.write_text(recipe.to_json(), encoding="utf-8")
    lines = PUMPS.read_text(encoding="utf-8").splitlines()
    part = tmp_path / "pumps_part.csv"
    part.write_text("\n".join(lines[:501]) + "\n", encoding="utf-8")
    done = _run("analyze", str(part), "--recipe", str(recipe_path), "--json", "-")
    assert done.returncode == 0, done.stderr
    assert "this file has 500 rows" in done.stderr
    assert json.loads(done.stdout)["data"]["rows_read"] == 500


@pytest.mark.parametrize(
    ("recipe_text", "message"),
    [
        ('{"hazel_recipe": 99}', "newer Hazel"),
        ("not json", "not valid JSON"),
        ('{"schema": 1}', "not a Hazel recipe"),
    ],
)
def test_bad_recipes_exit_2_with_one_line(tmp_path, recipe_text, message):
    recipe_path = tmp_path / "bad.json"
    recipe_path.write_text(recipe_text, encoding="utf-8")
    done = _run("analyze", str(PUMPS), "--recipe", str(recipe_path))
    assert done.returncode == 2
    assert done.stderr.startswith("error: ") and message in done.stderr
    assert len(done.stderr.strip().splitlines()) == 1
