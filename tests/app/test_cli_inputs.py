"""Command line on odd input values (issue 10, input side): the implausible-dates choice, bad date
formats and damaged files give a result or exit 2 with one ``error:`` line.

Run in-process through ``app.cli.main`` (the same function ``python -m app`` calls) to keep the
suite quick; ``test_cli_check.py`` covers the real subprocess.
"""

from __future__ import annotations

import json

import pandas as pd
import pytest

from app.cli import main


def _dates_file(tmp_path):
    path = tmp_path / "registry.csv"
    pd.DataFrame(
        {
            "entered": ["2001-01-01", "1900-01-01", "2003-03-03", "2004-04-04"],
            "left": ["2002-01-01", "2002-02-02", "9999-12-31", "2005-04-04"],
            "died": [1, 0, 1, 0],
        }
    ).to_csv(path, index=False)
    return path


def _check(capsys, *args):
    code = main(["check", *args, "--json", "-"])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_implausible_dates_are_counted_by_default_and_excluded_when_asked(tmp_path, capsys):
    path = str(_dates_file(tmp_path))
    roles = ["--start", "entered", "--end", "left", "--event", "died"]
    code, out, err = _check(capsys, path, *roles)
    assert (code, err) == (0, "")
    data = json.loads(out)["data"]
    assert data["rows_used"] == 4 and data["excluded"] == []
    assert any(w.startswith("2 row(s) have a date before 1900") for w in data["warnings"])
    code, out, err = _check(capsys, path, *roles, "--implausible-dates", "exclude")
    assert (code, err) == (0, "")
    data = json.loads(out)["data"]
    assert data["rows_used"] == 2
    assert data["excluded"] == [{"reason": "implausible date", "rows": 2}]


@pytest.mark.parametrize("fmt", ["%Q", "%Y-%m-%d %", "%Y-%Y-%m"])
def test_a_bad_date_format_exits_2_with_one_line(tmp_path, capsys, fmt):
    path = str(_dates_file(tmp_path))
    code, out, err = _check(
        capsys, path, "--start", "entered", "--end", "left", "--event", "died", "--date-format", fmt
    )
    assert code == 2 and out == ""
    assert err.startswith("error: The date format") and err.count("\n") == 1
    assert repr(fmt) in err


def test_a_damaged_workbook_exits_2_with_one_line(tmp_path, capsys):
    path = tmp_path / "export.xlsx"
    path.write_bytes(b"PK\x03\x04" + b"\x00" * 200)
    code, _out, err = _check(capsys, str(path), "--time", "t")
    assert code == 2 and err.startswith("error: ") and err.count("\n") == 1
    assert "export.xlsx" in err
