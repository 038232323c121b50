"""The command line's exit-status contract on hostile input (issue 10): exit 0 with results, or
exit 2 with exactly one ``error: ...`` line on stderr naming the option, field or column; never
exit 1 and never a traceback. No control character from a file name or label reaches the terminal
raw. Every data file and recipe here is written by the test itself."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from app.cli import main
from tests.app.demo_files import ROOT

ESC = "\x1b"


def _frame(n: int = 60, seed: int = 7) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "t": rng.exponential(10, n).round(2) + 0.01,
            "e": rng.integers(0, 2, n),
            "g": rng.choice(["a", "b"], n),
            "x": rng.normal(size=n).round(3),
        }
    )


@pytest.fixture
def data(tmp_path):
    path = tmp_path / "trial.csv"
    _frame().to_csv(path, index=False)
    return path


def _contract(capsys, argv) -> tuple[int, str, str]:
    """Run in process; bad input must give 2 and one error line, success 0."""
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    assert code in (0, 2), (code, err)
    if code == 2:
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: "), err
        assert "Traceback" not in err
    assert ESC not in out + err
    return code, out, err


BASE = ["--time", "t", "--event", "e"]


@pytest.mark.parametrize(
    ("options", "named"),
    [
        (["--power-hr", "1e308"], "--power-hr must be a number between 0 and 20"),
        (["--power-hr", "0.7", "--allocation", "1e308"], "--allocation must be a number"),
        (["--power-hr", "0.7", "--alpha", "1e-300", "--event-probability", "1e-308"], "subjects"),
        (["--power-hr", "0.7", "--alpha", "0.9"], "--alpha must be a number between 0 and 0.5"),
        (["--power-hr", "nan"], "--power-hr must be a finite number"),
        (["--power-hr", "0.7", "--events", "0"], "--events must be a number between 0"),
        (["--power-hr", "0.7", "--power", "1"], "--power must be a number between 0 and 1"),
        (["--group", "g", "--test", "fleming-harrington", "--rho", "nan"], "--rho must be"),
        (["--group", "g", "--test", "fleming-harrington", "--rho", "inf"], "--rho must be"),
        (["--group", "g", "--gamma", "-1"], "--gamma must be a number between 0 and 10"),
        (["--confidence", "nan"], "--confidence must be a finite number"),
        (["--confidence", "1"], "--confidence must be a number between 0 and 1"),
        (["--times=-1,2"], "--times: each value must be a number between 0"),
        (["--times", "nan"], "--times must be a finite number"),
        (["--times", "soon"], "--times expects numbers"),
        (["--landmark", "nan"], "--landmark must be a finite number"),
        (["--landmark", "-1"], "--landmark must be a number between 0"),
        (["--parametric", "--horizon", "inf"], "--horizon must be a finite number"),
        (["--parametric", "--horizon", "0"], "--horizon must be a number between 0"),
        (["--confidence", "0.95x"], "--confidence: invalid float value"),
        (["--test", "wilcoxon"], "--test: invalid choice"),
    ],
)
def test_every_option_is_checked_at_the_boundary_naming_it(capsys, data, options, named):
    code, _, err = _contract(capsys, ["analyze", data, *BASE, *options])
    assert code == 2
    assert named in err


@pytest.mark.parametrize(
    "options",
    [
        ["--power-hr", "0.7", "--alpha", "1e-300"],  # overflowed 1 - alpha before
        ["--power-hr", "19.9", "--allocation", "99"],
        ["--power-hr", "0.001", "--event-probability", "1e-6"],
        ["--group", "g", "--test", "fleming-harrington", "--rho", "10", "--gamma", "10"],
    ],
)
def test_extreme_options_inside_their_range_give_results(capsys, data, options):
    code, out, err = _contract(capsys, ["analyze", data, *BASE, *options, "--json", "-"])
    assert code == 0, err
    json.loads(out)


HOSTILE_RECIPE_FIELDS = [
    ("analyses.sample_size.hazard_ratio", "x"),
    ("analyses.sample_size.hazard_ratio", 1e308),
    ("analyses.curves", []),
    ("analyses.comparison.cut", {"column": "x", "groups": 10**18}),
    ("analyses.comparison.rho", "high"),
    ("analyses.cox.reference", "stage=II"),
    ("roles.covariates", {"x": 1}),
    ("roles", []),
    ("filters", [{"column": "x", "rule": "between", "values": ["low", "high"]}]),
    ("import_options.sep", 44),
    ("note", json.loads("[" * 20 + "1" + "]" * 20)),
]


def _recipe(data_path) -> dict:
    from engine.analysis.recipe import make_recipe
    from engine.io.tables import read_table
    from engine.prepare.roles import Roles

    table = read_table(data_path)
    return make_recipe(table, Roles(time="t", event="e", group="g"), {"curves": {}}).to_dict()


@pytest.mark.parametrize(("path", "value"), HOSTILE_RECIPE_FIELDS)
def test_a_hostile_recipe_field_is_one_error_naming_its_path(capsys, tmp_path, data, path, value):
    recipe = _recipe(data)
    *parents, last = path.split(".")
    node = recipe
    for part in parents:
        node = node.setdefault(part, {})
    node[last] = value
    recipe_path = tmp_path / "bad.recipe.json"
    recipe_path.write_text(json.dumps(recipe), encoding="utf-8")
    code, _, err = _contract(capsys, ["analyze", data, "--recipe", recipe_path])
    assert code == 2
    assert path.split(".")[-1] in err


@pytest.mark.parametrize(
    "text",
    [
        '{"hazel_recipe": 1, "data": {"sha256": "a", "rows": 1, "columns": []}, "note": Infinity}',
        '{"a":' * 50_000 + "1" + "}" * 50_000,
        '{"hazel_recipe": 0, "file": [], "roles": {}}',
        '{"hazel_recipe": 0, "file": {"hash": "a", "n_rows": 1, "columns": []}, "roles": {},'
        ' "settings": {"times": "12"}}',
        "\ufeff\x1b[2J not a recipe",
    ],
)
def test_a_hostile_recipe_file_is_one_error(capsys, tmp_path, data, text):
    recipe_path = tmp_path / "bad.recipe.json"
    recipe_path.write_text(text, encoding="utf-8")
    code, _, _ = _contract(capsys, ["analyze", data, "--recipe", recipe_path])
    assert code == 2


def test_a_file_name_with_an_escape_sequence_is_shown_as_codes(capsys, tmp_path):
    path = tmp_path / f"trial{ESC}]0;owned{ESC}[31m.csv"
    code, _, err = _contract(capsys, ["check", path, *BASE])
    assert code == 2
    assert "[U+001B]" in err


def _run(*args) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "app", *map(str, args)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=300,
        encoding="utf-8",
    )


def test_labels_with_controls_reach_neither_terminal_nor_report_raw(tmp_path):
    """A subprocess: an ESC in a label used to make the figure renderer abort the process."""
    frame = _frame()
    frame["g"] = np.where(frame["g"] == "a", f"arm{ESC}[31m", "\u202eB arm")
    path = tmp_path / "labels.csv"
    frame.to_csv(path, index=False)
    report = tmp_path / "report.html"
    done = _run("analyze", path, *BASE, "--group", "g", "--report", report)
    assert done.returncode == 0, done.stderr
    assert ESC not in done.stdout + done.stderr and "\u202e" not in done.stdout
    assert "[U+001B]" in done.stdout and "[U+202E]" in done.stdout
    html = report.read_text(encoding="utf-8")
    assert ESC not in html and "\u202e" not in html
    assert "[U+202E]B arm" in html
    assert "direction controls or control characters" in html


def test_report_with_missing_group_values_in_a_subprocess(tmp_path):
    frame = _frame()
    frame.loc[:5, "g"] = np.nan
    path = tmp_path / "groups.csv"
    frame.to_csv(path, index=False)
    report, out = tmp_path / "report.html", tmp_path / "out.json"
    done = _run("analyze", path, *BASE, "--group", "g", "--report", report, "--json", out)
    assert done.returncode == 0, done.stderr
    results = json.loads(out.read_text(encoding="utf-8"))
    assert results["comparison"]["rows_excluded"] == 6
    assert results["curves"][0]["n"] == 60  # the all-rows curve keeps them
    assert sum(c["n"] for c in results["curves"][1:]) == 54
    assert "6 row(s) without a group" in done.stdout
    assert "6 row(s) without a group" in report.read_text(encoding="utf-8")


def test_term_constant_within_strata_is_left_out_on_the_command_line(capsys, tmp_path):
    """Issue 10 item 7, end to end: the term is listed as not estimable, the tests have one
    degree of freedom, and the text summary carries the warning."""
    frame = _frame(120, seed=3).assign(site=lambda f: np.arange(len(f)) % 3)
    frame["budget"] = 10.0 * frame["site"] + 5
    path = tmp_path / "sites.csv"
    frame.to_csv(path, index=False)
    argv = ["analyze", path, *BASE, "--covariates", "x,budget", "--strata", "site"]
    code, out, _ = _contract(capsys, [*argv, "--json", "-"])
    assert code == 0
    cox = json.loads(out)["cox"]
    assert cox["not_estimable"] == ["budget"] and [t["variable"] for t in cox["terms"]] == ["x"]
    assert cox["likelihood_ratio"]["df"] == 1
    code, out, _ = _contract(capsys, argv)
    assert code == 0 and "'budget'" in out and "within every stratum" in out


def test_runaway_coefficients_give_no_whole_model_p_on_the_command_line(capsys, tmp_path):
    """Issue 10 item 10, end to end: no likelihood-ratio p of 0.0 when nothing is estimable."""
    n = 40
    frame = pd.DataFrame(
        {
            "t": np.arange(1, n + 1, dtype=float),
            "e": np.r_[np.ones(n // 2), np.zeros(n // 2)].astype(int),
            "x": np.r_[np.ones(n // 2), np.zeros(n // 2)],
        }
    )
    path = tmp_path / "separated.csv"
    frame.to_csv(path, index=False)
    code, out, _ = _contract(capsys, ["analyze", path, *BASE, "--covariates", "x", "--json", "-"])
    assert code == 0
    cox = json.loads(out)["cox"]
    assert cox["likelihood_ratio"]["p_value"] is None and cox["wald"]["p_value"] is None
    code, out, _ = _contract(capsys, ["analyze", path, *BASE, "--covariates", "x"])
    assert "Likelihood ratio  chi-squared not estimable, p not estimable" in out


@pytest.mark.parametrize("backend", ["memory", "duckdb"])
@pytest.mark.parametrize("sep", ["ab", '"'])
def test_a_separator_that_cannot_work_is_one_error_line_on_every_backend(
    data, capsys, backend, sep
):
    code, _out, err = _contract(
        capsys, ["analyze", data, *BASE, "--sep", sep, "--backend", backend]
    )
    assert code == 2 and "separator must be one character" in err
