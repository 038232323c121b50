"""Cox terms that the data cannot estimate (issue 10, items 7 and 10).

Item 7: a covariate that takes one value within every stratum has no information in a stratified
partial likelihood (subjects are only compared with others of their stratum). It is left out with
a message and the tests' degrees of freedom count only the terms estimated. Checked against the
exact property that the fit then equals the fit without that covariate, and against lifelines'
stratified Cox model (a general-purpose reference library).

Item 10: when every coefficient runs off to infinity (monotone likelihood) there is no finite
estimate for the likelihood-ratio or Wald test, so neither is reported; the score test, computed at
zero, still holds. With one binary covariate and no tied times it is the log-rank test (an exact
identity), checked against lifelines' log-rank test.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from engine.cox.fit import fit_cox
from engine.errors import AnalysisError


def _stratified_frame(n: int = 240, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    site = rng.integers(0, 3, n)
    age = rng.normal(55, 9, n)
    hazard = np.exp(0.03 * (age - 55) + 0.4 * site)
    frame = pd.DataFrame(
        {
            "_time": rng.exponential(1 / hazard) * 10 + 0.01,
            "_event": (rng.uniform(size=n) < 0.75).astype(int),
            "site": site,
            "age": age,
        }
    )
    frame["site_budget"] = 100.0 + 25.0 * frame["site"]  # one value per site
    return frame


def test_term_constant_within_strata_is_left_out_and_df_is_honest():
    frame = _stratified_frame()
    with_it = fit_cox(frame, ["age", "site_budget"], strata="site")
    without = fit_cox(frame, ["age"], strata="site")
    assert with_it.not_estimable == ("site_budget",)
    assert [t.variable for t in with_it.terms] == ["age"]
    assert with_it.likelihood_ratio.df == 1 and with_it.wald.df == 1 and with_it.score.df == 1
    assert with_it.terms[0].coef == pytest.approx(without.terms[0].coef, rel=1e-10)
    assert with_it.likelihood_ratio.statistic == pytest.approx(
        without.likelihood_ratio.statistic, rel=1e-10
    )
    assert any("site_budget" in w and "'site'" in w for w in with_it.warnings)
    assert not any("infinity" in w for w in with_it.warnings)
    assert with_it.to_dict()["not_estimable"] == ["site_budget"]


def test_left_out_term_agrees_with_lifelines_stratified_model():
    lifelines = pytest.importorskip("lifelines")
    frame = _stratified_frame(seed=11)
    ours = fit_cox(frame, ["age", "site_budget"], strata="site", ties="efron")
    reference = lifelines.CoxPHFitter().fit(
        frame[["_time", "_event", "site", "age"]],
        duration_col="_time",
        event_col="_event",
        strata=["site"],
    )
    assert ours.terms[0].coef == pytest.approx(reference.params_["age"], rel=1e-6)
    assert ours.terms[0].se == pytest.approx(reference.standard_errors_["age"], rel=1e-5)


def test_level_of_a_categorical_constant_within_strata_is_left_out():
    frame = _stratified_frame(seed=5)
    frame["region"] = np.where(frame["site"] == 2, "north", "south")  # a function of the site
    frame["arm"] = np.random.default_rng(5).choice(["a", "b"], len(frame))
    result = fit_cox(frame, ["arm", "region"], categorical=["arm", "region"], strata="site")
    assert result.not_estimable == ("region: south vs north",)
    assert [t.label for t in result.design.terms] == ["arm: b vs a"]
    assert result.likelihood_ratio.df == 1


def test_every_term_constant_within_strata_is_a_clear_error():
    frame = _stratified_frame()
    with pytest.raises(AnalysisError, match=r"site_budget.*stratum of 'site'"):
        fit_cox(frame, ["site_budget"], strata="site")


def _separated_frame() -> pd.DataFrame:
    """Every event among x = 1 and all of those before any x = 0 row leaves: the partial
    likelihood increases without bound in the coefficient of x."""
    return pd.DataFrame(
        {
            "_time": np.arange(1, 41, dtype=float),
            "_event": np.r_[np.ones(20), np.zeros(20)].astype(int),
            "x": np.r_[np.ones(20), np.zeros(20)],
        }
    )


def test_all_coefficients_running_off_give_no_likelihood_ratio_or_wald_test():
    result = fit_cox(_separated_frame(), ["x"])
    as_json = json.loads(json.dumps(result.to_dict()))
    assert as_json["likelihood_ratio"]["p_value"] is None
    assert as_json["wald"]["p_value"] is None
    assert as_json["score"]["p_value"] is not None
    assert any("not reported" in w for w in result.warnings)


def test_score_test_under_separation_is_the_log_rank_test():
    statistics = pytest.importorskip("lifelines.statistics")
    frame = _separated_frame()
    result = fit_cox(frame, ["x"], ties="breslow")
    ones = frame["x"] == 1
    reference = statistics.logrank_test(
        frame["_time"][ones],
        frame["_time"][~ones],
        frame["_event"][ones],
        frame["_event"][~ones],
    )
    assert result.score.statistic == pytest.approx(reference.test_statistic, rel=1e-8)


def test_a_finite_coefficient_beside_a_runaway_one_keeps_the_tests():
    frame = _separated_frame()
    frame["z"] = np.random.default_rng(2).normal(size=len(frame))
    result = fit_cox(frame, ["x", "z"])
    assert np.isfinite(result.likelihood_ratio.p_value)
    assert not any("not reported" in w for w in result.warnings)


def _monotone_file(path) -> None:
    """Level "a" of x has no events: its coefficient runs off to infinity (an exact property of
    the partial likelihood, which then rises for ever as the coefficient of "b" grows)."""
    rng = np.random.default_rng(1)
    n = 40
    x = np.where(np.arange(n) % 2 == 0, "a", "b")
    event = np.where(x == "a", 0, rng.integers(0, 2, n))
    event[1] = 1
    pd.DataFrame(
        {"t": rng.exponential(10, n).round(2), "e": event, "x": x, "age": rng.normal(50, 10, n)}
    ).to_csv(path, index=False)


@pytest.mark.parametrize("backend", ["memory", "duckdb"])
def test_a_runaway_coefficient_has_no_se_p_or_interval(tmp_path, backend, capsys):
    """The SE, p-value and interval of a coefficient that runs off are null in the JSON and
    "not estimable" in the text and the report (no "p < 0.001" nor [HR, HR]); the warning
    stays, and the finite term keeps its numbers (memory and the fit from sums alike)."""
    from app.cli import main

    path = tmp_path / "mono.csv"
    _monotone_file(path)
    out, report = tmp_path / "r.json", tmp_path / "r.html"
    args = ["analyze", str(path), "--time", "t", "--event", "e", "--covariates", "x,age"]
    args += ["--categorical", "x", "--backend", backend, "--json", str(out)]
    assert main([*args, "--report", str(report)] if backend == "memory" else args) == 0
    text = capsys.readouterr().out
    cox = json.loads(out.read_text())["cox"]
    runaway, age = cox["terms"]
    assert runaway["coef"] > 10  # where the fit stopped: far out
    assert [runaway[k] for k in ("se", "se_model", "p_value", "lower", "upper")] == [None] * 5
    assert all(age[k] is not None for k in ("se", "p_value", "lower", "upper"))
    assert any("run off to infinity" in w for w in cox["warnings"])
    row = next(line for line in text.splitlines() if "x: b vs a" in line and "Warning" not in line)
    assert row.count("not estimable") == 2 and "<" not in row  # the interval and the p-value
    if backend == "memory":
        html = report.read_text()
        cells = html[html.index("x: b vs a</td>") :].split("</tr>")[0]
        assert cells.count("not estimable") == 3  # interval, p-value, standard error
        assert "not estimable (runs off to infinity)" in html  # the forest plot's text column
        assert "The hazard ratio for x b versus a could not be estimated" in html  # sentences
