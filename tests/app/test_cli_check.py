"""``python -m app check``: exit codes, JSON shape, readable summary, one-line errors."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[2]
DATA = ROOT / "tests" / "engine" / "data"
DEMO = ROOT / "demo_data"
DATA_KEYS = [
    "rows_read", "rows_used", "events", "competing_events", "censored", "time_unit", "excluded",
    "warnings",
]  # fmt: skip


def run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "app", *args], cwd=ROOT, capture_output=True, text=True, timeout=120
    )


def test_check_writes_schema_2_json_and_a_summary(tmp_path):
    out = tmp_path / "result.json"
    done = run(
        "check",
        str(DATA / "clinic_export_bom_semicolon.csv"),
        "--start",
        "Enrolment date",
        "--end",
        "Last contact",
        "--day-first",
        "--event",
        "Status",
        "--group",
        "Arm",
        "--unit",
        "months",
        "--json",
        str(out),
    )
    assert done.returncode == 0, done.stderr
    assert done.stderr == ""
    result = json.loads(out.read_text())
    assert list(result) == ["schema", "data"]
    assert result["schema"] == 2
    data = result["data"]
    assert list(data) == DATA_KEYS
    assert data["rows_read"] == 8 and data["rows_used"] == 4
    assert data["time_unit"] == "months"
    assert {e["reason"]: e["rows"] for e in data["excluded"]} == {
        "missing time": 1,
        "unparseable date": 1,
        "end before start": 1,
        "missing event": 1,
    }
    assert "Rows read 8, used 4" in done.stdout
    assert "excluded: 1 row(s), end before start" in done.stdout


def test_json_to_stdout_is_pure_json():
    done = run(
        "check",
        str(DEMO / "pump_bearings.csv"),
        "--time",
        "months_in_service",
        "--unit",
        "months",
        "--event",
        "failed",
        "--group",
        "supplier",
        "--covariates",
        "load_kN,lubricant",
        "--categorical",
        "lubricant",
        "--reference",
        "lubricant=oil bath",
        "--json",
        "-",
    )
    assert done.returncode == 0, done.stderr
    data = json.loads(done.stdout)["data"]
    frame = pd.read_csv(DEMO / "pump_bearings.csv")
    assert data["rows_read"] == len(frame)
    assert data["events"] == int(frame["failed"].sum())
    assert data["events"] + data["competing_events"] + data["censored"] == data["rows_used"]


def test_event_values_and_sheet(tmp_path):
    path = tmp_path / "herd.xlsx"
    frame = pd.DataFrame({"weeks": [1.0, 2, 3, 4], "status": ["sold", "died", "in herd", "died"]})
    with pd.ExcelWriter(path) as writer:
        pd.DataFrame({"x": [1]}).to_excel(writer, sheet_name="notes", index=False)
        frame.to_excel(writer, sheet_name="herd", index=False)
    done = run(
        "check",
        str(path),
        "--sheet",
        "herd",
        "--time",
        "weeks",
        "--unit",
        "weeks",
        "--event",
        "status",
        "--event-value",
        "died",
        "--event-value",
        "sold",
        "--json",
        "-",
    )
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout)["data"]["events"] == 3


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["check", "no/such/file.csv", "--time", "t"], "File not found"),
        (
            ["check", str(DATA / "one_two_status.csv"), "--time", "nope"],
            "'nope' is not in the data",
        ),
        (["check", str(DATA / "one_two_status.csv")], "No time given"),
        (["check", str(DATA / "one_two_status.csv"), "--time", "time", "--bogus"], "unrecognized"),
        (["check", str(DATA / "one_two_status.csv"), "--time", "time", "--unit", "hours"], "hours"),
        (["check", str(DATA / "one_two_status.csv"), "--time", "t", "--sep", ";;"], "--sep"),
        (
            ["check", str(DATA / "one_two_status.csv"), "--time", "t", "--reference", "x"],
            "COL=LEVEL",
        ),
        (["check", str(DATA / "lab_latin1.tsv"), "--time", "days", "--event", "group"], "'pré'"),
        (["check", str(DATA)], "not a file"),
        ([], "command"),
    ],
)
def test_bad_input_exits_2_with_one_line(args, message):
    done = run(*args)
    assert done.returncode == 2
    assert done.stdout == ""
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    assert lines[0].startswith("error: ")
    assert message in lines[0]
    assert "Traceback" not in done.stderr


def test_unwritable_json_target_is_an_input_error(tmp_path):
    done = run(
        "check",
        str(DATA / "one_two_status.csv"),
        "--time",
        "time",
        "--json",
        str(tmp_path / "missing" / "dir" / "out.json"),
    )
    assert done.returncode == 2
    assert done.stderr.startswith("error: cannot write")


def test_a_bug_exits_1():
    code = (
        "import sys, app.cli as cli\n"
        "def broken(args):\n"
        "    raise RuntimeError('a bug')\n"
        "cli.run_check = broken\n"
        f"sys.exit(cli.main(['check', {str(DATA / 'one_two_status.csv')!r}, '--time', 'time']))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert done.returncode == 1
    assert "RuntimeError" in done.stderr


def test_in_process_helpers_build_roles_and_options():
    from app.cli import build_parser, import_options_from_args, roles_from_args

    args = build_parser().parse_args(
        [
            "check",
            "x.csv",
            "--time",
            "t",
            "--time-unit",
            "weeks",
            "--unit",
            "years",
            "--covariates",
            "a, b",
            "--categorical",
            "b",
            "--reference",
            "b=low",
            "--sep",
            "\\t",
            "--sheet",
            "2",
        ]
    )
    roles = roles_from_args(args)
    assert roles.covariates == ("a", "b")
    assert roles.reference == (("b", "low"),)
    assert (roles.unit, roles.source_unit) == ("years", "weeks")
    options = import_options_from_args(args)
    assert options.sep == "\t" and options.sheet == 2


def test_the_former_dayfirst_spelling_still_works_with_a_deprecation_line(tmp_path):
    args = [
        "check",
        str(DATA / "clinic_export_bom_semicolon.csv"),
        "--start",
        "Enrolment date",
        "--end",
        "Last contact",
        "--event",
        "Status",
        "--json",
        "-",
    ]
    new = run(*args[:6], "--day-first", *args[6:])
    old = run(*args[:6], "--dayfirst", *args[6:])
    assert new.returncode == old.returncode == 0
    assert new.stderr == ""
    assert old.stderr.strip() == (
        "warning: --dayfirst is deprecated and will be removed in the next release; use --day-first"
    )
    assert json.loads(old.stdout) == json.loads(new.stdout)
