"""The engine on one-row, zero-row and extreme inputs (issue 20): a section that cannot be
computed says why in words (never a numpy reduction error or a dict repr), and the parametric
fits keep the exact property of every family here: a change of time unit changes the time
scale parameter by the same factor and nothing else."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from engine.analysis.run import run_analysis
from engine.cox.design import build_design
from engine.errors import AnalysisError, FileReadError, NoRowsError
from engine.io.tables import ImportOptions, read_table
from engine.io.text import text_encoding
from engine.parametric.aft import fit_aft
from engine.parametric.fits import DISTRIBUTIONS, fit_distribution, fit_parametric
from engine.prepare.checks import prepare
from engine.prepare.filters import FilterError, RowFilter, apply_filters
from engine.prepare.roles import Roles
from engine.survival.landmark import landmark


def _frame(n: int = 60, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "t": (rng.weibull(1.5, n) * 10 + 0.01).round(3),
            "e": np.r_[1, rng.integers(0, 2, n - 1)],
            "g": rng.choice(["a", "b"], n),
            "x": rng.normal(size=n).round(3),
        }
    )


def _prepared(frame: pd.DataFrame, **roles):
    return prepare(frame, Roles(time="t", event="e", **roles))


# --- parametric fits ------------------------------------------------------------------------


def test_one_row_fits_the_exponential_and_lists_the_others_as_failed():
    result = fit_parametric(_prepared(pd.DataFrame({"t": [4.5], "e": [1]})).frame)
    assert [f.distribution for f in result.fits] == ["exponential"]
    # exact: rate = events / time at risk = 1 / 4.5
    assert result.fits[0].theta[0] == pytest.approx(np.log(1 / 4.5), rel=1e-12)
    failed = {d: reason for d, _, reason in result.failed}
    assert set(failed) == {"weibull", "log-normal", "log-logistic"}
    assert "at least two distinct times" in failed["weibull"]


def test_identical_times_do_not_give_a_false_maximum_for_two_parameter_families():
    """With a single distinct time the two-parameter likelihood is unbounded: lifelines
    returned log-likelihoods of +100 and more, which then won the AIC table."""
    frame = _prepared(pd.DataFrame({"t": [5.0] * 10, "e": [1, 0] * 5})).frame
    result = fit_parametric(frame)
    assert [f.distribution for f in result.fits] == ["exponential"]


def test_no_rows_and_all_rows_at_time_zero_are_said_in_words():
    empty = _prepared(_frame()).frame.iloc[:0]
    with pytest.raises(NoRowsError, match="There are no rows to analyse"):
        fit_parametric(empty)
    zero = _prepared(pd.DataFrame({"t": [0.0, 0.0, 0.0], "e": [1, 0, 1]})).frame
    with pytest.raises(AnalysisError, match="all 3 row\\(s\\) are at time 0"):
        fit_parametric(zero)


def test_fits_by_group_with_every_group_missing_say_so():
    frame = _frame(30).assign(g=np.nan)
    with pytest.raises(AnalysisError, match="every row's group is missing"):
        fit_parametric(_prepared(frame, group="g").frame, by_group=True)


@pytest.mark.parametrize("scale", [2.0**-100, 1e-30, 1e30, 1e200, 1e-200])
@pytest.mark.parametrize("distribution", DISTRIBUTIONS)
def test_a_change_of_time_unit_only_rescales_the_fit(distribution, scale):
    """Exact property: T' = s T multiplies a scale parameter by s (adds log s to the mean of
    log time, subtracts it from the log rate), leaves the shape alone and lowers the
    log-likelihood by (events) log s. Unscaled, lifelines stopped at its starting values for
    1e-30 and at a false maximum for 1e200."""
    frame = _frame()
    time, event = frame["t"].to_numpy(), frame["e"].to_numpy()
    base = fit_distribution(time, event, distribution)
    moved = fit_distribution(time * scale, event, distribution)
    shift = np.log(scale)
    if distribution == "exponential":
        assert moved.theta[0] == pytest.approx(base.theta[0] - shift, abs=1e-9)
    elif distribution == "log-normal":
        assert moved.theta[0] == pytest.approx(base.theta[0] + shift, abs=1e-4)
        assert moved.theta[1] == pytest.approx(base.theta[1], rel=1e-4)
    else:
        assert moved.theta[0] / scale == pytest.approx(base.theta[0], rel=1e-4)
        assert moved.theta[1] == pytest.approx(base.theta[1], rel=1e-4)
    events = int(event.sum())
    assert moved.log_likelihood == pytest.approx(base.log_likelihood - events * shift, abs=1e-5)


@pytest.mark.parametrize("distribution", DISTRIBUTIONS)
def test_a_change_of_time_unit_only_moves_the_aft_intercept(distribution):
    frame = _prepared(_frame(80), covariates=("x",)).frame
    base = fit_aft(frame, ["x"], distribution)
    moved = fit_aft(frame.assign(_time=frame["_time"] * 1e-40), ["x"], distribution)
    a, b = base.coefficients.set_index("term"), moved.coefficients.set_index("term")
    assert b.loc["Intercept", "coef"] == pytest.approx(
        a.loc["Intercept", "coef"] + np.log(1e-40), abs=1e-4
    )
    assert b.loc["x", "coef"] == pytest.approx(a.loc["x", "coef"], abs=1e-4)
    assert b.loc["x", "std_error"] == pytest.approx(a.loc["x", "std_error"], rel=1e-3)


def test_times_too_wide_to_bring_near_one_are_refused_in_words():
    frame = _frame(30)
    time = frame["t"].to_numpy() * 1e29
    time[0] = 1e-310
    with pytest.raises(AnalysisError, match="The times range from 1e-310"):
        fit_distribution(time, frame["e"].to_numpy(), "weibull")


# --- landmark, Cox design, the whole run ------------------------------------------------------


def test_landmark_on_no_rows_says_there_are_none():
    with pytest.raises(NoRowsError):
        landmark(_prepared(_frame()).frame.iloc[:0], 1.0)


def test_the_cox_design_names_missing_variables_in_words():
    frame = _frame(10).assign(x=np.nan)
    with pytest.raises(AnalysisError) as error:
        build_design(frame, ["x", "g"], categorical=["g"])
    assert "missing: x in 10 row(s)" in str(error.value)
    assert "{" not in str(error.value)
    with pytest.raises(NoRowsError, match="every row was excluded before the model"):
        build_design(frame.iloc[:0], ["x"])


def test_a_run_with_no_usable_row_says_so_in_every_section_asked_for():
    frame = _frame(30).assign(t=-1.0)
    prepared = _prepared(frame, group="g", covariates=("x",))
    settings = {
        "parametric": {},
        "landmark": {"time": 1.0},
        "competing": {},
        "performance": {"times": [5.0]},
        "baseline": {},
    }
    sections = run_analysis(prepared, settings, frame)
    expected = "No row is usable: all 30 row(s) read were excluded (negative time: 30)"
    for name in ("curves", "comparison", "cox", *settings):
        assert expected in sections[name]["not_computed"], name
    assert "{}" not in str(sections)
    assert sections["data"]["rows_used"] == 0


def test_the_report_of_a_run_with_no_usable_row_says_what_happened():
    from app.batch import report_from_json_and_results
    from engine.io.tables import ImportedTable

    frame = _frame(20).assign(t=-1.0)
    prepared = _prepared(frame, covariates=("x",))
    sections = run_analysis(prepared, {}, frame)
    imported = ImportedTable(
        frame=frame, source_name="neg.csv", file_format="csv", options=ImportOptions(), sha256="0"
    )
    html = report_from_json_and_results(sections, {}, imported=imported, prepared=prepared)
    assert "No row is usable" in html and "rows missing per variable" not in html


# --- import options and filters ---------------------------------------------------------------


@pytest.mark.parametrize("codec", ["idna", "punycode", "rot13", "hex", "unknown-codec"])
def test_only_text_encodings_are_accepted(tmp_path, codec):
    with pytest.raises(FileReadError, match="is not a text encoding"):
        text_encoding(codec)
    path = tmp_path / "a.csv"
    path.write_bytes("t,e,n\n1,1,é\n2,0,ü\n".encode())
    with pytest.raises(FileReadError, match="choose one of utf-8"):
        read_table(path, ImportOptions(encoding=codec))


@pytest.mark.parametrize("alias", ["utf8", "UTF-8", "latin1", "iso-8859-1", "windows-1252"])
def test_names_of_text_encodings_are_accepted(alias):
    assert text_encoding(alias) == alias


def test_filters_that_keep_no_row_are_refused_with_each_filters_count():
    frame = _frame(25)
    kept = apply_filters(frame, [RowFilter("x", "at_least", (-99,))])
    assert kept.refuse_if_empty() is kept
    outcome = apply_filters(frame, [RowFilter("x", "at_least", (99,))])
    with pytest.raises(FilterError, match="would remove every row \\(x at least 99: 25 removed"):
        outcome.refuse_if_empty()


@pytest.mark.parametrize("backend", ["memory", "duckdb"])
def test_cumulative_incidence_by_a_group_that_is_all_missing_says_so(tmp_path, backend):
    """Every row's group missing: the competing section says why in words on both backends
    (an IndexError in memory before; found by the fuzz run, seed 8202)."""
    from app.cli import main

    path = tmp_path / "causes.csv"
    pd.DataFrame({"t": [1.0, 2.0, 3.0, 4.0], "e": [1, 2, 0, 1], "g": [""] * 4}).to_csv(
        path, index=False
    )
    out = tmp_path / "r.json"
    argv = ["analyze", str(path), "--time", "t", "--event", "e", "--group", "g",
            "--competing", "1=relapse", "--competing", "2=death"]  # fmt: skip
    assert main([*argv, "--backend", backend, "--json", str(out)]) == 0
    competing = json.loads(out.read_text())["competing"]
    assert "every row's group is missing" in competing["not_computed"]
