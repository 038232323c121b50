"""The command line on one-row, zero-row and extreme inputs for every optional analysis (issue
20): each run ends in results (exit 0) or in one ``error: ...`` line with exit 2 that names the
option, column or value, never in a traceback (exit 1). Every data file is written by the test."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from tests.app.test_cli_hostile import _contract  # exit 0, or 2 with one error line

BASE = ["--time", "t", "--event", "e"]
CAUSES = ["--time", "t", "--event", "c", "--competing", "1=death", "--competing", "2=other"]

# every optional analysis (and the core ones with their options), as command-line options
ANALYSES = {
    "curves": [*BASE, "--times", "1,5", "--group", "g"],
    "cox": [*BASE, "--covariates", "x,s", "--strata", "s"],
    "parametric": [*BASE, "--parametric"],
    "parametric_aft": [*BASE, "--parametric", "--covariates", "x"],
    "parametric_group": [*BASE, "--parametric", "--group", "g"],
    "landmark": [*BASE, "--landmark", "0.5", "--group", "g"],
    "performance": [*BASE, "--covariates", "x", "--performance", "5", "--bootstrap", "3"],
    "competing": [*CAUSES, "--group", "g", "--covariates", "x"],
    "fine_gray": [*CAUSES, "--covariates", "x", "--fine-gray", "death", "--group", "g"],
    "splines": [*BASE, "--covariates", "x", "--spline", "x:3"],
    "split": [*BASE, "--covariates", "x", "--split-at", "3"],
    "subgroups": [*BASE, "--group", "g", "--subgroups", "s"],
    "baseline": [*BASE, "--baseline", "--group", "g", "--baseline-compare", "test"],
    "power": [*BASE, "--power-hr", "0.7"],
    "entry": [*BASE, "--entry", "en", "--group", "g", "--covariates", "x"],
}


def _frame(n: int, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(
        {
            "t": rng.exponential(10, n).round(2) + 0.01,
            "e": rng.integers(0, 2, n),
            "g": rng.choice(["a", "b"], n),
            "x": rng.normal(size=n).round(3),
            "c": rng.choice([0, 1, 2], n),
            "s": rng.choice(["p", "q"], n),
            "en": 0.0,
        }
    )
    if n:
        frame.loc[0, ["e", "c"]] = 1  # at least one event of each coding
    return frame


def _negative_times(tmp_path, rows: int = 30):
    """A file in which no row is usable: every time is negative."""
    path = tmp_path / "negative.csv"
    _frame(rows).assign(t=-1.0).to_csv(path, index=False)
    return path


@pytest.mark.parametrize("analysis", list(ANALYSES))
@pytest.mark.parametrize("rows", [1, 3])
def test_one_and_few_rows_give_results_for_every_analysis(capsys, tmp_path, analysis, rows):
    """One row crashed the parametric fits (len() of unsized object); three rows with a spline
    wrote an infinite bound that json.dumps refused."""
    path = tmp_path / "few.csv"
    _frame(rows).to_csv(path, index=False)
    out_json = tmp_path / "out.json"
    argv = ["analyze", path, *ANALYSES[analysis], "--json", out_json]
    code, _, err = _contract(capsys, [*argv, "--report", tmp_path / "r.html"])
    assert code == 0, err
    json.loads(out_json.read_text(encoding="utf-8"))


def test_one_row_parametric_fits_the_exponential_and_says_why_the_others_fail(capsys, tmp_path):
    path = tmp_path / "one.csv"
    pd.DataFrame({"t": [4.5], "e": [1]}).to_csv(path, index=False)
    code, out, err = _contract(capsys, ["analyze", path, *BASE, "--parametric", "--json", "-"])
    assert code == 0, err
    section = json.loads(out)["parametric"]
    assert [row["distribution"] for row in section["aic_table"]] == ["exponential"]
    reasons = {row["distribution"]: row["reason"] for row in section["failed"]}
    assert set(reasons) == {"weibull", "log-normal", "log-logistic"}
    assert all("at least two distinct times" in r for r in reasons.values())


@pytest.mark.parametrize("analysis", list(ANALYSES))
def test_a_filter_that_removes_every_row_is_refused(capsys, tmp_path, analysis):
    path = tmp_path / "trial.csv"
    _frame(40).to_csv(path, index=False)
    argv = ["analyze", path, *ANALYSES[analysis], "--filter", "t:at_most:0"]
    code, _, err = _contract(capsys, argv)
    assert code == 2
    assert "would remove every row (t at most 0: 40 removed)" in err


def test_check_refuses_a_filter_that_removes_every_row_too(capsys, tmp_path):
    path = tmp_path / "trial.csv"
    _frame(20).to_csv(path, index=False)
    code, _, err = _contract(capsys, ["check", path, *BASE, "--filter", "x:at_least:99"])
    assert code == 2 and "would remove every row" in err


@pytest.mark.parametrize("analysis", list(ANALYSES))
def test_analyze_with_no_usable_row_exits_2_with_the_exclusion_counts(capsys, tmp_path, analysis):
    path = _negative_times(tmp_path)
    code, out, err = _contract(capsys, ["analyze", path, *ANALYSES[analysis]])
    assert code == 2
    assert "No row is usable: all 30 row(s) read were excluded (negative time: 30)" in err
    assert out == ""


def test_check_with_no_usable_row_still_reports_and_exits_0(capsys, tmp_path):
    path = _negative_times(tmp_path)
    code, out, _ = _contract(capsys, ["check", path, *BASE, "--json", "-"])
    assert code == 0
    assert json.loads(out)["data"]["rows_used"] == 0


def test_no_usable_row_on_the_duckdb_backend_exits_2_too(capsys, tmp_path):
    path = _negative_times(tmp_path)
    code, _, err = _contract(capsys, ["analyze", path, *BASE, "--backend", "duckdb"])
    assert code == 2 and "No row is usable" in err
    code, _, err = _contract(
        capsys, ["analyze", path, *BASE, "--backend", "duckdb", "--filter", "x:at_least:99"]
    )
    assert code == 2 and "would remove every row" in err


@pytest.mark.parametrize("scale", [1e30, 1e-30, 1e200])
@pytest.mark.parametrize("analysis", list(ANALYSES))
def test_times_of_extreme_scale_give_results_for_every_analysis(capsys, tmp_path, analysis, scale):
    """1e30-scale times once ended the parametric fit in a native abort; every section must
    finish on such times (results, or a section that says why it was not computed)."""
    path = tmp_path / "extreme.csv"
    frame = _frame(40)
    frame["t"] = frame["t"] * scale
    frame.to_csv(path, index=False)
    code, out, err = _contract(capsys, ["analyze", path, *ANALYSES[analysis], "--json", "-"])
    assert code in (0, 2), err
    if code == 0:
        json.loads(out)


def test_a_stray_tiny_time_among_huge_ones_is_named_by_the_parametric_section(capsys, tmp_path):
    path = tmp_path / "stray.csv"
    frame = _frame(40)
    frame["t"] = frame["t"] * 1e29
    frame.loc[3, "t"] = 1e-310
    frame.to_csv(path, index=False)
    code, out, err = _contract(capsys, ["analyze", path, *BASE, "--parametric", "--json", "-"])
    assert code == 0, err
    reason = json.loads(out)["parametric"]["not_computed"]
    assert "The times range from 1e-310" in reason and "too wide" in reason


@pytest.mark.parametrize("codec", ["idna", "punycode", "rot13", "base64", "no-such-codec"])
def test_encoding_must_be_a_text_encoding_and_the_message_lists_them(capsys, tmp_path, codec):
    path = tmp_path / "accents.csv"
    path.write_bytes("t,e,n\n1,1,é\n2,0,ü\n".encode())
    code, _, err = _contract(capsys, ["check", path, *BASE, "--encoding", codec])
    assert code == 2
    assert f"--encoding: {codec!r} is not a text encoding" in err
    assert "utf-8, utf-8-sig, utf-16" in err and "cp1252" in err


@pytest.mark.parametrize("alias", ["utf8", "latin1", "windows-1252", "UTF-8"])
def test_aliases_of_text_encodings_are_accepted(capsys, tmp_path, alias):
    path = tmp_path / "plain.csv"
    path.write_bytes(b"t,e\n1,1\n2,0\n3,1\n")
    code, _, err = _contract(capsys, ["check", path, *BASE, "--encoding", alias])
    assert code == 0, err


def test_a_recipe_with_a_non_text_encoding_is_refused(capsys, tmp_path):
    from engine.analysis.recipe import make_recipe
    from engine.io.tables import ImportOptions, read_table
    from engine.prepare.roles import Roles

    path = tmp_path / "trial.csv"
    _frame(20).to_csv(path, index=False)
    recipe = make_recipe(read_table(path, ImportOptions()), Roles(time="t", event="e"), {})
    data = recipe.to_dict()
    data["import_options"]["encoding"] = "idna"
    recipe_path = tmp_path / "recipe.json"
    recipe_path.write_text(json.dumps(data), encoding="utf-8")
    code, _, err = _contract(capsys, ["analyze", path, "--recipe", recipe_path])
    assert code == 2 and "'idna' is not a text encoding" in err


@pytest.mark.parametrize("name", ["x.pdf", "report", "x.htm", "x.docx.txt"])
def test_report_suffix_must_be_one_hazel_writes(capsys, tmp_path, name):
    path = tmp_path / "trial.csv"
    _frame(20).to_csv(path, index=False)
    target = tmp_path / name
    code, out, err = _contract(capsys, ["analyze", path, *BASE, "--report", target])
    assert code == 2
    assert "Hazel writes reports as .html, .docx, .xlsx" in err
    assert not target.exists() and out == ""


def test_report_suffix_is_matched_without_regard_to_case(capsys, tmp_path):
    path = tmp_path / "trial.csv"
    _frame(20).to_csv(path, index=False)
    target = tmp_path / "x.HTML"
    code, _, err = _contract(capsys, ["analyze", path, *BASE, "--report", target])
    assert code == 0, err
    assert "<html" in target.read_text(encoding="utf-8").lower()


@pytest.mark.parametrize(
    ("options", "named", "not_named"),
    [
        (["--calibration-time", "1e9"], "(--calibration-time) 1000000000.0", "Performance times"),
        (["--tau", "1e9"], "tau (--tau) = 1e+09", "Performance times"),
        (["--performance", "1e9"], "Performance times (--performance) 1000000000.0", "calibr"),
    ],
)  # fmt: skip
def test_a_time_outside_follow_up_is_blamed_on_the_option_that_set_it(
    capsys, tmp_path, options, named, not_named
):
    path = tmp_path / "trial.csv"
    _frame(60).to_csv(path, index=False)
    argv = ["analyze", path, *BASE, "--covariates", "x", "--performance", "10", "--bootstrap"]
    code, out, err = _contract(capsys, [*argv, "0", *options, "--json", "-"])
    assert code == 0, err
    reason = json.loads(out)["performance"]["not_computed"]
    assert named in reason and not_named not in reason


@pytest.mark.parametrize("group", ["", "NA"])
def test_a_recipe_fitting_parametric_models_by_a_group_that_is_all_missing(capsys, tmp_path, group):
    """The recipe's parametric fits by group, the group column entirely missing: every row was
    left out and the fit met an empty array (zero-size array ... fmax)."""
    from engine.analysis.recipe import make_recipe
    from engine.io.tables import ImportOptions, read_table
    from engine.prepare.roles import Roles

    path = tmp_path / "trial.csv"
    _frame(30).assign(g=group).to_csv(path, index=False)
    table = read_table(path, ImportOptions())
    recipe = make_recipe(
        table, Roles(time="t", event="e", group="g"), {"parametric": {"by_group": True}}
    )
    recipe_path = tmp_path / "recipe.json"
    recipe_path.write_text(json.dumps(recipe.to_dict()), encoding="utf-8")
    code, out, err = _contract(capsys, ["analyze", path, "--recipe", recipe_path, "--json", "-"])
    assert code == 0, err
    reason = json.loads(out)["parametric"]["not_computed"]
    assert "every row's group is missing" in reason
