"""The baseline table against pandas' own computations, the standardised differences against
Austin's (2009) formulas recomputed by hand, and the tests against statsmodels and exact
identities."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.contingency_tables import Table
from statsmodels.stats.oneway import anova_oneway

from engine.analysis.baseline import (
    ROW_KEYS,
    baseline_table,
    display_frame,
    standardised_difference_means,
    standardised_difference_proportions,
)
from engine.analysis.run import run_analysis
from engine.errors import AnalysisError, RoleError
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles


@pytest.fixture
def cohort(rng) -> pd.DataFrame:
    n = 300
    frame = pd.DataFrame(
        {
            "arm": rng.choice(["control", "treated"], n, p=[0.45, 0.55]),
            "age": np.round(rng.normal(60, 10, n), 1),
            "stage": rng.choice(["I", "II", "III"], n),
            "score": rng.integers(0, 4, n),
            "weeks": rng.exponential(30, n),
            "died": rng.integers(0, 2, n),
        }
    )
    frame.loc[rng.choice(n, 12, replace=False), "age"] = np.nan
    frame.loc[rng.choice(n, 7, replace=False), "stage"] = None
    return frame


def _table(cohort, **options):
    return baseline_table(
        cohort[["age", "stage", "score"]],
        cohort["arm"],
        group_name="arm",
        categorical=["score"],
        **options,
    )


def test_numbers_are_those_pandas_computes(cohort):
    result = _table(cohort).to_frame()
    for group, part in [(None, cohort), *cohort.groupby("arm")]:
        rows = result[result["group"].isna()] if group is None else result[result["group"] == group]
        age = rows[rows["variable"] == "age"].iloc[0]
        values = part["age"].dropna()
        assert age["count"] == len(values)
        assert age["missing"] == part["age"].isna().sum()
        assert age["median"] == pytest.approx(values.median(), abs=0, rel=1e-15)
        assert age["q1"] == pytest.approx(values.quantile(0.25), rel=1e-15)
        assert age["q3"] == pytest.approx(values.quantile(0.75), rel=1e-15)
        assert age["mean"] == pytest.approx(values.mean(), rel=1e-15)
        assert age["sd"] == pytest.approx(values.std(), rel=1e-15)
        assert math.isnan(age["percent"]) or age["percent"] is None
        stage = rows[rows["variable"] == "stage"].set_index("level")
        shares = part["stage"].value_counts(normalize=True) * 100
        counts = part["stage"].value_counts()
        for level in ("I", "II", "III"):
            assert stage.loc[level, "count"] == counts[level]
            assert stage.loc[level, "percent"] == pytest.approx(shares[level], rel=1e-12)
            assert stage.loc[level, "missing"] == part["stage"].isna().sum()
        assert stage["percent"].sum() == pytest.approx(100.0)
        score = rows[rows["variable"] == "score"]
        assert score["level"].tolist() == [0, 1, 2, 3]  # numbers declared categorical


def test_json_rows_have_exactly_the_documented_keys(cohort):
    out = _table(cohort).to_dict()
    assert set(out) == {"group", "rows"}
    assert out["group"] == "arm"
    assert all(tuple(row) == ROW_KEYS for row in out["rows"])
    numeric = [r for r in out["rows"] if r["variable"] == "age"]
    assert [r["group"] for r in numeric] == [None, "control", "treated"]
    assert all(r["level"] is None and r["percent"] is None for r in numeric)
    categorical = [r for r in out["rows"] if r["variable"] == "stage"]
    assert all(r["median"] is None and r["mean"] is None for r in categorical)


def test_standardised_differences_follow_austin_2009(cohort):
    """Austin (2009), Statistics in Medicine 28:3083-3107: continuous d = (x̄T − x̄C) /
    sqrt((s²T + s²C)/2); dichotomous d = (p̂T − p̂C) / sqrt((p̂T(1−p̂T) + p̂C(1−p̂C))/2),
    recomputed here from pandas' means, variances and proportions."""
    out = _table(cohort, compare="smd").to_dict()
    by = {(b["variable"], b["level"]): b for b in out["balance"]}
    treated = cohort[cohort["arm"] == "treated"]
    control = cohort[cohort["arm"] == "control"]
    expected = (treated["age"].mean() - control["age"].mean()) / math.sqrt(
        (treated["age"].var() + control["age"].var()) / 2
    )
    assert by[("age", None)]["standardized_difference"] == pytest.approx(expected, rel=1e-12)
    assert by[("age", None)]["reference_group"] == "control"
    for level in ("I", "II", "III"):
        pt = (treated["stage"].dropna() == level).mean()
        pc = (control["stage"].dropna() == level).mean()
        d = (pt - pc) / math.sqrt((pt * (1 - pt) + pc * (1 - pc)) / 2)
        assert by[("stage", level)]["standardized_difference"] == pytest.approx(d, rel=1e-12)


@settings(max_examples=50, deadline=None)
@given(
    st.lists(st.floats(-1e3, 1e3), min_size=3, max_size=30),
    st.lists(st.floats(-1e3, 1e3), min_size=3, max_size=30),
    st.floats(0.01, 100),
    st.floats(-100, 100),
)
def test_standardised_difference_is_scale_free_and_antisymmetric(a, b, scale, shift):
    a, b = np.array(a), np.array(b)
    d = standardised_difference_means(a.mean(), a.std(ddof=1), b.mean(), b.std(ddof=1))
    if d is None or a.std(ddof=1) + b.std(ddof=1) < 1e-6:
        return
    a2, b2 = a * scale + shift, b * scale + shift
    d2 = standardised_difference_means(a2.mean(), a2.std(ddof=1), b2.mean(), b2.std(ddof=1))
    assert d2 == pytest.approx(d, rel=1e-6, abs=1e-9)
    back = standardised_difference_means(b.mean(), b.std(ddof=1), a.mean(), a.std(ddof=1))
    assert back == pytest.approx(-d, rel=1e-12, abs=1e-12)


def test_proportion_difference_edge_cases():
    assert standardised_difference_proportions(0.5, 0.5) == 0
    assert standardised_difference_proportions(0.0, 0.0) is None  # no spread: undefined
    # p = 0.6 vs 0.4: 0.2 / sqrt(0.24) = 0.408
    assert standardised_difference_proportions(0.6, 0.4) == pytest.approx(0.2 / math.sqrt(0.24))


def test_tests_agree_with_statsmodels_and_exact_identities(cohort):
    medians = {b["variable"]: b for b in _table(cohort, compare="test").to_dict()["balance"]}
    means = {
        b["variable"]: b
        for b in _table(cohort, compare="test", summary="mean").to_dict()["balance"]
    }
    # categorical: Pearson chi-squared of the contingency table (statsmodels Table)
    known = cohort.dropna(subset=["stage"])
    reference = Table(pd.crosstab(known["stage"], known["arm"])).test_nominal_association()
    assert medians["stage"]["statistic"] == pytest.approx(reference.statistic, rel=1e-10)
    assert medians["stage"]["df"] == reference.df
    assert medians["stage"]["p_value"] == pytest.approx(reference.pvalue, rel=1e-8)
    # mean summary: one-way ANOVA F (statsmodels anova_oneway with equal variances)
    ages = cohort.dropna(subset=["age"])
    groups = [ages.loc[ages["arm"] == g, "age"] for g in ("control", "treated")]
    anova = anova_oneway(groups, use_var="equal")
    assert means["age"]["statistic"] == pytest.approx(anova.statistic, rel=1e-10)
    assert means["age"]["p_value"] == pytest.approx(anova.pvalue, rel=1e-8)
    # median summary, two groups: Kruskal–Wallis H has the p-value of the Mann–Whitney test
    # (normal approximation with tie correction, no continuity correction): an exact identity
    mw = stats.mannwhitneyu(*groups, use_continuity=False, method="asymptotic")
    assert medians["age"]["test"] == "Kruskal–Wallis"
    assert medians["age"]["p_value"] == pytest.approx(mw.pvalue, rel=1e-10)


def test_display_rounds_by_the_manuscript_rules(cohort):
    table = _table(cohort, compare="smd")
    shown = display_frame(table, labels={"age": "Age (years)"})
    assert list(shown.columns[:2]) == ["Variable", "Level"]
    assert shown.columns[2].startswith("All rows (n = 300")
    age = shown[shown["Variable"] == "age (Age (years))"]
    assert age.iloc[0]["Level"] == "median (quartiles)"
    values = cohort["age"].dropna()
    from engine.wording import format_number

    expected = (
        f"{format_number(values.median())} ({format_number(values.quantile(0.25))} to "
        f"{format_number(values.quantile(0.75))})"
    )
    assert age.iloc[0][shown.columns[2]] == expected
    assert age.iloc[1]["Level"] == "missing" and age.iloc[1][shown.columns[2]] == "12"
    stage = shown[(shown["Variable"] == "stage") & (shown["Level"] == "I")].iloc[0]
    count = int((cohort["stage"] == "I").sum())
    assert stage[shown.columns[2]].startswith(f"{count} (")


def test_errors_are_clear(cohort):
    with pytest.raises(AnalysisError, match="at least two values"):
        baseline_table(cohort[["age"]], None, compare="smd")
    with pytest.raises(AnalysisError, match="'median' or 'mean'"):
        baseline_table(cohort[["age"]], summary="mode")
    dated = pd.DataFrame({"d": pd.to_datetime(["2020-01-01", "2020-02-01"])})
    with pytest.raises(RoleError, match="holds dates"):
        baseline_table(dated)


def test_run_analysis_adds_the_baseline_section(cohort):
    roles = Roles(time="weeks", event="died", group="arm", covariates=("age", "stage"))
    prepared = prepare(cohort, roles)
    sections = run_analysis(prepared, {"baseline": {}}, cohort)
    baseline = sections["baseline"]
    assert baseline["group"] == "arm"
    assert {r["variable"] for r in baseline["rows"]} == {"age", "stage"}
    alone = run_analysis(prepared, {"baseline": {"group": False, "variables": ["score"]}}, cohort)
    assert alone["baseline"]["group"] is None
    assert {r["group"] for r in alone["baseline"]["rows"]} == {None}
    chosen = {"baseline": {"group": "stage", "variables": ["age"]}}
    by_stage = run_analysis(prepared, chosen, cohort)
    assert [r["group"] for r in by_stage["baseline"]["rows"]] == [None, "I", "II", "III"]
    # without covariates: every column without a role
    bare = prepare(cohort, Roles(time="weeks", event="died", group="arm"))
    section = run_analysis(bare, {"baseline": {}}, cohort)["baseline"]
    assert [*dict.fromkeys(r["variable"] for r in section["rows"])] == ["age", "stage", "score"]


@pytest.mark.parametrize("compare", [None, "smd", "test"])
def test_the_json_form_gives_back_the_same_displayed_table(cohort, compare):
    from engine.analysis.baseline import BaselineTable

    table = _table(cohort, compare=compare, summary="mean")
    again = BaselineTable.from_dict(table.to_dict(), summary="mean")
    pd.testing.assert_frame_equal(display_frame(again), display_frame(table))
    assert again.sizes == (300, *cohort["arm"].value_counts().sort_index().tolist())
