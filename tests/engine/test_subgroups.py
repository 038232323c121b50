"""Subgroup effects of a two-level treatment.

Outside reference: statsmodels ``PHReg`` (Efron ties). Each row equals a separate fit of the
treatment indicator on that subgroup's rows; each interaction test equals the likelihood-ratio
test of two nested statsmodels fits (treatment + subgroup dummies, and with the products).
Exact property: relabelling or reordering a subgroup variable's levels leaves its interaction
test unchanged.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from statsmodels.duration.hazard_regression import PHReg

from engine.cox.subgroups import CAUTION, fit_subgroups
from engine.errors import AnalysisError
from engine.prepare.columns import cut_at_quantiles


def trial(seed: int, n: int = 600) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    arm = rng.choice(["control", "active"], n)
    site = rng.choice(["north", "south", "east"], n, p=[0.4, 0.35, 0.25])
    age = rng.normal(60, 9, n)
    effect = np.where(arm == "active", np.where(site == "east", 0.1, -0.5), 0.0)
    time = np.round(rng.exponential(12 * np.exp(-effect - 0.01 * (age - 60))), 0) + 1
    return pd.DataFrame(
        {
            "_time": time,
            "_event": rng.binomial(1, 0.75, n),
            "_group": pd.Categorical(arm, ["control", "active"]),
            "site": site,
            "age": age,
        }
    )


def statsmodels_fit(frame, columns):
    return PHReg(frame["_time"], frame[columns], status=frame["_event"], ties="efron").fit()


def test_each_row_equals_a_separate_statsmodels_fit():
    frame = trial(1)
    result = fit_subgroups(
        frame, {"site": frame["site"], "age": frame["age"]}, treatment_name="arm"
    )
    assert result.treatment == "arm: active vs control"
    frame = frame.assign(active=(frame["_group"] == "active").astype(float))
    age_groups = cut_at_quantiles(frame["age"], 2, "age")
    expected_levels = [("site", s) for s in ["east", "north", "south"]]
    expected_levels += [("age", str(level)) for level in age_groups.cat.categories]
    assert [(r.variable, r.level) for r in result.rows] == expected_levels
    for row in result.rows:
        values = frame["site"] if row.variable == "site" else age_groups.astype(str)
        inside = frame[(values == row.level).to_numpy()]
        reference = statsmodels_fit(inside, ["active"])
        low, high = np.exp(reference.conf_int()[0])
        assert row.hazard_ratio == pytest.approx(np.exp(reference.params[0]), abs=1e-6)
        assert (row.lower, row.upper) == pytest.approx((low, high), abs=1e-6)
        assert row.n == len(inside) and row.events == inside["_event"].sum()
    overall = statsmodels_fit(frame, ["active"])
    assert result.overall.hazard_ratio == pytest.approx(np.exp(overall.params[0]), abs=1e-6)
    assert result.to_dict()["caution"] == CAUTION


def test_interactions_equal_likelihood_ratio_tests_of_nested_statsmodels_fits():
    frame = trial(2)
    result = fit_subgroups(frame, {"site": frame["site"], "age": frame["age"]})
    frame = frame.assign(active=(frame["_group"] == "active").astype(float))
    age_groups = cut_at_quantiles(frame["age"], 2, "age").astype(str)
    for test, values in zip(result.interactions, [frame["site"], age_groups], strict=True):
        dummies = pd.get_dummies(values, drop_first=True, dtype=float)
        products = dummies.mul(frame["active"], axis=0).add_prefix("x_")
        base = pd.concat([frame[["_time", "_event", "active"]], dummies], axis=1)
        full = pd.concat([base, products], axis=1)
        smaller = statsmodels_fit(base, ["active", *dummies.columns])
        larger = statsmodels_fit(full, ["active", *dummies.columns, *products.columns])
        assert test.statistic == pytest.approx(2 * (larger.llf - smaller.llf), abs=1e-6)
        assert test.df == dummies.shape[1]


def test_numeric_subgroup_cut_into_chosen_quantile_groups():
    frame = trial(3)
    result = fit_subgroups(frame, {"age": frame["age"]}, groups=3)
    assert len(result.rows) == 3 and result.interactions[0].df == 2
    assert sum(r.n for r in result.rows) == len(frame)


def test_few_valued_numeric_subgroup_used_level_by_level():
    frame = trial(4).assign(dose=lambda f: np.where(f["age"] > 60, 2.0, 1.0))
    result = fit_subgroups(frame, {"dose": frame["dose"]})
    assert [r.level for r in result.rows] == ["1", "2"]


def test_level_without_events_in_one_arm_has_no_hazard_ratio():
    frame = trial(5)
    rare = (frame["site"] == "east") & (frame["_group"] == "active")
    frame.loc[rare, "_event"] = 0
    row = next(r for r in fit_subgroups(frame, {"site": frame["site"]}).rows if r.level == "east")
    assert row.hazard_ratio is None and "no events" in row.note
    assert row.to_dict()["hazard_ratio"] is None


def test_treatment_must_have_two_levels():
    frame = trial(6)
    frame["_group"] = pd.Categorical(frame["site"])
    with pytest.raises(AnalysisError, match="exactly two levels"):
        fit_subgroups(frame, {"age": frame["age"]}, treatment_name="site")
    with pytest.raises(AnalysisError, match="at least one subgroup"):
        fit_subgroups(trial(6), {})


@settings(max_examples=10, deadline=None, derandomize=True)
@given(permutation=st.permutations(["north", "south", "east"]))
def test_property_relabelling_levels_leaves_the_interaction_test_unchanged(permutation):
    frame = trial(7, n=300)
    relabel = dict(
        zip(["north", "south", "east"], [f"level {p}" for p in permutation], strict=True)
    )
    first = fit_subgroups(frame, {"site": frame["site"]}).interactions[0]
    second = fit_subgroups(frame, {"site": frame["site"].map(relabel)}).interactions[0]
    assert_allclose(second.statistic, first.statistic, rtol=1e-7)
