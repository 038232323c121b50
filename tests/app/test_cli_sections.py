"""Whole runs are not lost to one section (issue 10, items 8 and 12), on the command line:
competing events counted apart from censored rows, a section the data do not allow says why in
its own place while every other section is produced, parametric fits leave out rows at time 0
with a count, row filters as ``--filter``, and a closed pipe ends quietly. Every data file here is
written by the test itself."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from app.cli import main
from tests.app.demo_files import ROOT
from tests.app.test_cli_hostile import _frame


def _run_in_process(capsys, *argv) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    assert code in (0, 2), err
    if code == 2:
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: "), err
    return code, out, err


def _cohort(n: int = 90, seed: int = 4) -> pd.DataFrame:
    """The hostile tests' small cohort with an age column to filter on."""
    return _frame(n, seed).assign(age=np.random.default_rng(seed).integers(20, 90, n))


def test_competing_events_are_counted_apart_from_censored(capsys, tmp_path):
    frame = _cohort().assign(outcome=lambda f: np.arange(len(f)) % 3)  # 0 censored, 1, 2
    path = tmp_path / "causes.csv"
    frame.to_csv(path, index=False)
    argv = ["analyze", path, "--time", "t", "--event", "outcome", "--event-value", "1",
            "--competing", "2=moved away", "--group", "g"]  # fmt: skip
    code, out, _ = _run_in_process(capsys, *argv, "--json", "-")
    assert code == 0
    data = json.loads(out)["data"]
    counts = frame["outcome"].value_counts()
    assert (data["events"], data["competing_events"], data["censored"]) == (
        counts[1],
        counts[2],
        counts[0],
    )
    code, text, _ = _run_in_process(capsys, *argv)
    assert f"{counts[1]} events, {counts[2]} competing events, {counts[0]} censored" in text
    assert "competing" in text.split("Group: g")[1].splitlines()[1]  # the group table's header


def test_all_censored_data_with_a_group_still_gives_curves(capsys, tmp_path):
    path = tmp_path / "quiet.csv"
    _cohort().assign(e=0).to_csv(path, index=False)
    argv = ["analyze", path, "--time", "t", "--event", "e", "--group", "g", "--covariates", "x"]
    code, out, _ = _run_in_process(capsys, *argv, "--json", "-")
    assert code == 0
    results = json.loads(out)
    assert [c["events"] for c in results["curves"]] == [0, 0, 0]
    assert "not_computed" in results["comparison"] and "not_computed" in results["cox"]
    report = tmp_path / "quiet.html"
    code, text, _ = _run_in_process(capsys, *argv, "--report", report)
    assert code == 0 and "Cox model: not computed." in text
    html = report.read_text(encoding="utf-8")
    assert html.count("Not computed.") >= 2 and "<svg" in html


def test_parametric_fits_leave_out_time_zero_rows_with_a_count(capsys, tmp_path):
    frame = _cohort()
    frame.loc[:2, ["t", "e"]] = [0.0, 1]  # three events on day 0
    path = tmp_path / "day0.csv"
    frame.to_csv(path, index=False)
    argv = ["analyze", path, "--time", "t", "--event", "e", "--parametric"]
    code, out, _ = _run_in_process(capsys, *argv, "--json", "-")
    assert code == 0
    parametric = json.loads(out)["parametric"]
    assert parametric["rows_time_zero"] == 3 and parametric["aic_table"]
    code, text, _ = _run_in_process(capsys, *argv)
    assert "3 row(s) with time 0 left out of these fits" in text


def test_filters_on_the_command_line_keep_the_rows_that_pass(capsys, tmp_path):
    frame = _cohort()
    path = tmp_path / "ages.csv"
    frame.to_csv(path, index=False)
    argv = ["analyze", path, "--time", "t", "--event", "e", "--group", "g",
            "--filter", "age:between:30,60", "--filter", "g:in:a", "--json", "-"]  # fmt: skip
    code, out, _ = _run_in_process(capsys, *argv)
    assert code == 0
    results = json.loads(out)
    kept = frame[frame["age"].between(30, 60) & (frame["g"] == "a")]
    assert results["data"]["rows_read"] == len(kept)
    assert results["filters"]["rows_kept"] == len(kept)


@pytest.mark.parametrize(
    ("value", "named"),
    [
        ("age:between:30", "between"),
        ("age:between:30,inf", "finite"),
        ("age", "COLUMN:RULE"),
        ("nowhere:not_missing", "nowhere"),
    ],
)
def test_a_bad_filter_is_one_error_line(capsys, tmp_path, value, named):
    path = tmp_path / "ages.csv"
    _cohort().to_csv(path, index=False)
    code, _, err = _run_in_process(
        capsys, "check", path, "--time", "t", "--event", "e", "--filter", value
    )
    assert code == 2 and named in err


def test_a_closed_pipe_ends_quietly(tmp_path):
    """About 570 kB of JSON (survival at 1,000 times in three curves), far more than a pipe
    holds, so the writer meets the closed pipe."""
    path = tmp_path / "long.csv"
    _cohort(3000).to_csv(path, index=False)
    times = ",".join(f"{0.01 * i:.2f}" for i in range(1, 1001))
    command = [sys.executable, "-m", "app", "analyze", str(path), "--time", "t", "--event", "e",
               "--group", "g", "--times", times, "--json", "-"]  # fmt: skip
    with subprocess.Popen(
        command, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE
    ) as process:
        process.stdout.read(10)
        process.stdout.close()  # the reader stops early, as `| head -c 10` does
        err = process.stderr.read().decode()
        code = process.wait(timeout=120)
    assert code == 0 and "Traceback" not in err and "error" not in err


def test_covariates_named_like_the_residual_table_columns_in_the_report(capsys, tmp_path):
    """Found by the large fuzz run: a covariate named "transformed_time" (or "time") picked the
    wrong column of the residual table and the report's residual figure failed."""
    frame = _cohort(120).rename(columns={"x": "transformed_time", "age": "time"})
    path = tmp_path / "names.csv"
    frame.to_csv(path, index=False)
    report = tmp_path / "names.html"
    code, _, _ = _run_in_process(
        capsys, "analyze", path, "--time", "t", "--event", "e",
        "--covariates", "transformed_time,time", "--report", report,
    )  # fmt: skip
    assert code == 0 and "Scaled Schoenfeld residuals" in report.read_text(encoding="utf-8")


def test_a_header_cell_over_the_csv_field_limit_is_a_clear_error(capsys, tmp_path):
    """Found by the large fuzz run: a header-only file whose one field passes 128 kB raised the
    csv module's own error."""
    path = tmp_path / "wide_cell.csv"
    path.write_text("t," + "x" * 200_000 + "\n", encoding="utf-8")
    code, _, err = _run_in_process(capsys, "check", path, "--time", "t", "--event", "e")
    assert code == 2 and "no data rows" in err
