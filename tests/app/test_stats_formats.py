"""SPSS, Stata and SAS files through the command line, the report and the app's pages."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from streamlit.testing.v1 import AppTest

from app import state
from engine.prepare.roles import Roles
from tests.stats_files import LABELLED_FORMATS, WRITERS, coded_trial, trial_as_csv

ROOT = Path(__file__).resolve().parents[2]
ENTRY = str(ROOT / "app" / "hazel.py")


def run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "app", *args], cwd=ROOT, capture_output=True, text=True, timeout=180
    )


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("cli_stats")
    coded = coded_trial()
    out = {fmt: write(coded, folder / f"trial.{fmt}") for fmt, write in WRITERS.items()}
    (folder / "labelled.csv").write_bytes(trial_as_csv(coded, labelled=True))
    (folder / "codes.csv").write_bytes(trial_as_csv(coded, labelled=False))
    out["labelled.csv"], out["codes.csv"] = folder / "labelled.csv", folder / "codes.csv"
    return out


def _analyze(path: Path, event_value: str, *extra: str) -> dict:
    done = run(
        "analyze", str(path), "--time", "weeks", "--unit", "weeks", "--event", "status",
        "--event-value", event_value, "--group", "arm", "--covariates", "age,sex",
        "--categorical", "sex", "--times", "12,26", "--json", "-", *extra,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


@pytest.mark.parametrize("fmt", ["sav", "dta", "sas7bdat"])
def test_cli_gives_the_numbers_of_the_same_data_in_csv(fmt, files):
    labelled = fmt in LABELLED_FORMATS
    csv = files["labelled.csv" if labelled else "codes.csv"]
    value = "relapsed" if labelled else "1"
    assert _analyze(files[fmt], value) == _analyze(csv, value)


def test_cli_refuses_a_damaged_file_with_one_line(files, tmp_path):
    cut = tmp_path / "cut.dta"
    cut.write_bytes(files["dta"].read_bytes()[:300])
    done = run("check", str(cut), "--time", "weeks")
    assert done.returncode == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and "Stata" in lines[0]


def test_report_shows_variable_labels_beside_the_columns(files, tmp_path):
    out = tmp_path / "r.html"
    _analyze(files["sav"], "relapsed", "--report", str(out))
    html = out.read_text(encoding="utf-8")
    assert "arm (Treatment arm)" in html
    assert "weeks (Weeks from randomisation to relapse or last visit)" in html


def test_pages_show_labels_and_codes_of_an_uploaded_sav(files):
    at = AppTest.from_file(ENTRY, default_timeout=120).run()
    at.session_state[state.PENDING_UPLOAD] = ("trial.sav", files["sav"].read_bytes())
    at.run()
    assert not at.exception and not at.error
    table = at.session_state[state.TABLE]
    assert table.file_format == "sav" and table.column_labels["arm"] == "Treatment arm"
    notes = "\n".join(c.value for c in at.caption)
    assert "Value labels of 3 column(s)" in notes
    at.session_state[state.ROLES] = Roles(
        time="weeks", unit="weeks", event="status", event_values=("relapsed",), group="arm"
    )
    at.switch_page("views/column_roles.py").run()
    assert not at.exception
    group = at.selectbox(key="roles_group")
    assert group.value == "arm"
    assert "arm — Treatment arm" in group.options
    codes = [d.value for d in at.dataframe if "code" in d.value.columns]
    assert codes, "the value-label table is on the Column roles page"
    shown = codes[0]
    arm = shown[shown["column"] == "arm"]
    assert arm["code"].tolist() == ["1", "2"]
    assert arm["label"].tolist() == ["standard", "new drug"]


def test_a_recipe_made_on_a_sav_file_replays_without_differences(files, tmp_path):
    from engine.analysis.recipe import make_recipe
    from engine.io.tables import read_table
    from engine.prepare.filters import RowFilter

    table = read_table(files["sav"])
    roles = Roles(time="weeks", unit="weeks", event="status", event_values=("relapsed",))
    recipe = make_recipe(
        table,
        roles,
        {"curves": {"times": [12]}, "baseline": {"group": "arm", "variables": ["sex", "age"]}},
        filters=(RowFilter("sex", "in", ("female",)),),
    )
    assert recipe.fingerprint.sha256 == table.sha256 and recipe.fingerprint.rows == 60
    path = tmp_path / "trial.recipe.json"
    path.write_text(recipe.to_json(), encoding="utf-8")
    done = run("analyze", str(files["sav"]), "--recipe", str(path), "--json", "-")
    assert done.returncode == 0, done.stderr
    assert "warning:" not in done.stderr  # same file, same fingerprint
    result = json.loads(done.stdout)
    females = int((table.frame["sex"] == "female").sum())
    assert result["data"]["rows_read"] == females
    assert result["filters"]["rows_kept"] == females
    sexes = {r["level"] for r in result["baseline"]["rows"] if r["variable"] == "sex"}
    assert sexes == {"female"}
