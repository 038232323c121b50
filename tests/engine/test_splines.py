"""Restricted cubic splines in the Cox model.

Outside reference: statsmodels ``PHReg`` fitted on patsy's natural cubic regression spline basis
``cr(x, knots=inner, lower_bound=t1, upper_bound=tk, constraints="center")`` with the same knots
spans the same space as Harrell's truncated-power basis, so the log-likelihood, the
non-linearity test (against a statsmodels fit with x linear) and the hazard-ratio curve must
agree. Exact properties: the curve is 1 at the reference; a change of units of x moves the knots
and the curve with it; a linear true effect gives a non-significant non-linearity test.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import patsy
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import stats
from statsmodels.duration.hazard_regression import PHReg

from engine.cox.splines import KNOT_QUANTILES, fit_splines, knot_positions, spline_basis
from engine.errors import AnalysisError


def simulated(seed: int, n: int = 800, curved: bool = True) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.normal(50, 10, n)
    z = rng.binomial(1, 0.5, n).astype(float)
    shape = -0.002 * (x - 50) ** 2 if curved else 0.03 * (x - 50)
    time = np.round(rng.exponential(10 * np.exp(shape - 0.4 * z)), 1) + 0.1
    return pd.DataFrame({"_time": time, "_event": rng.binomial(1, 0.8, n), "x": x, "z": z})


def cr_basis(frame, knots):
    inner = list(knots[1:-1])
    formula = (
        f"cr(x, knots={inner}, lower_bound={knots[0]}, upper_bound={knots[-1]}, "
        "constraints='center') - 1"
    )
    return patsy.dmatrix(formula, frame)


@pytest.mark.parametrize("knots", [3, 4, 5, 7])
def test_fit_test_and_curve_match_statsmodels_on_the_cr_basis(knots):
    frame = simulated(3)
    model = fit_splines(frame, ["x", "z"], [{"variable": "x", "knots": knots}])
    effect = model.effects[0]
    basis = cr_basis(frame, effect.knots)
    design = np.column_stack([np.asarray(basis), frame["z"]])
    spline_fit = PHReg(frame["_time"], design, status=frame["_event"], ties="efron").fit()
    linear_fit = PHReg(
        frame["_time"], frame[["x", "z"]], status=frame["_event"], ties="efron"
    ).fit()
    assert model.result.loglik == pytest.approx(spline_fit.llf, abs=1e-6)
    statistic = 2 * (spline_fit.llf - linear_fit.llf)
    assert effect.nonlinearity.statistic == pytest.approx(statistic, abs=1e-6)
    assert effect.nonlinearity.df == knots - 2
    assert effect.nonlinearity.p_value == pytest.approx(stats.chi2.sf(statistic, knots - 2))
    # The curve from statsmodels' coefficients on its own basis, relative to the reference.
    grid = effect.curve["x"].to_numpy()
    at = patsy.build_design_matrices([basis.design_info], {"x": grid})[0]
    ref = patsy.build_design_matrices([basis.design_info], {"x": [effect.reference]})[0]
    contrast = np.asarray(at) - np.asarray(ref)
    k = contrast.shape[1]
    log_hr = contrast @ spline_fit.params[:k]
    cov = spline_fit.cov_params()[:k, :k]
    se = np.sqrt(np.einsum("ij,jk,ik->i", contrast, cov, contrast))
    assert_allclose(np.log(effect.curve["hazard_ratio"]), log_hr, atol=1e-6)
    upper = np.log(effect.curve["upper"])
    assert_allclose(upper, log_hr + stats.norm.ppf(0.975) * se, atol=1e-5)


def test_knots_at_harrell_quantiles_and_outer_knots_for_small_samples():
    values = np.arange(1.0, 1001.0)
    for k, quantiles in KNOT_QUANTILES.items():
        assert_allclose(knot_positions(values, k), np.quantile(values, quantiles))
    small = np.arange(1.0, 51.0)
    assert knot_positions(small, 4)[[0, -1]].tolist() == [5.0, 46.0]
    with pytest.raises(AnalysisError, match="3 to 7 knots"):
        knot_positions(values, 8)
    with pytest.raises(AnalysisError, match="too few distinct values"):
        knot_positions(np.r_[np.zeros(500), np.ones(500)], 5)


def test_basis_is_linear_beyond_the_outer_knots():
    knots = [1.0, 2.0, 4.0, 7.0]
    x = np.linspace(8, 20, 13)
    second_difference = np.diff(spline_basis(x, knots), n=2, axis=0)
    assert_allclose(second_difference, 0, atol=1e-9)
    assert_allclose(spline_basis([0.5, 1.0], knots)[:, 1:], 0)


def test_curve_is_one_at_the_reference_and_follows_a_change_of_units():
    frame = simulated(5)
    model = fit_splines(frame, ["x", "z"], [{"variable": "x", "knots": 4, "reference": 45.0}])
    curve = model.effects[0].curve.set_index("x")
    assert curve.loc[45.0].tolist() == pytest.approx([1.0, 1.0, 1.0])
    rescaled = frame.assign(x=frame["x"] / 10 + 3)
    other = fit_splines(rescaled, ["x", "z"], [{"variable": "x", "knots": 4, "reference": 7.5}])
    assert_allclose(
        np.asarray(other.effects[0].knots), (np.asarray(model.effects[0].knots)) / 10 + 3
    )
    assert_allclose(other.effects[0].curve["hazard_ratio"], curve["hazard_ratio"], rtol=1e-6)
    assert other.effects[0].nonlinearity.statistic == pytest.approx(
        model.effects[0].nonlinearity.statistic, rel=1e-7
    )


def test_two_splines_each_tested_against_its_own_linear_version():
    frame = simulated(9).assign(w=lambda f: np.random.default_rng(1).normal(size=len(f)))
    model = fit_splines(
        frame, ["x", "z", "w"], [{"variable": "x", "knots": 4}, {"variable": "w", "knots": 3}]
    )
    x_effect, w_effect = model.effects
    basis_w = cr_basis(frame.rename(columns={"w": "x", "x": "xx"}), w_effect.knots)
    basis_x = cr_basis(frame, x_effect.knots)
    both = np.column_stack([np.asarray(basis_x), frame["z"], np.asarray(basis_w)])
    full = PHReg(frame["_time"], both, status=frame["_event"], ties="efron").fit()
    x_linear = np.column_stack([frame["x"], frame["z"], np.asarray(basis_w)])
    reduced = PHReg(frame["_time"], x_linear, status=frame["_event"], ties="efron").fit()
    assert x_effect.nonlinearity.statistic == pytest.approx(2 * (full.llf - reduced.llf), abs=1e-6)
    assert [t.label for t in model.result.design.terms] == [
        "x",
        "x (spline 1)",
        "x (spline 2)",
        "z",
        "w",
        "w (spline 1)",
    ]


def test_refuses_categorical_unknown_and_badly_counted_splines():
    frame = simulated(2).assign(g=lambda f: pd.Categorical(np.where(f["z"] > 0, "a", "b")))
    with pytest.raises(AnalysisError, match="not a covariate"):
        fit_splines(frame, ["x"], [{"variable": "age"}])
    with pytest.raises(AnalysisError, match="categorical"):
        fit_splines(frame, ["x", "g"], [{"variable": "g"}], categorical=["g"])
    with pytest.raises(AnalysisError, match="whole number from 3 to"):
        fit_splines(frame, ["x"], [{"variable": "x", "knots": 4.5}])
    with pytest.raises(AnalysisError, match="named twice"):
        fit_splines(frame, ["x"], [{"variable": "x"}, {"variable": "x", "knots": 3}])


@settings(max_examples=6, deadline=None, derandomize=True)
@given(seed=st.integers(0, 2**31 - 1))
def test_property_a_linear_effect_gives_a_non_significant_nonlinearity_test(seed):
    frame = simulated(seed, n=4000, curved=False)
    effect = fit_splines(frame, ["x", "z"], [{"variable": "x", "knots": 3}]).effects[0]
    # Derandomized examples: a fixed set of seeds, so this cannot fail by chance on a rerun.
    assert effect.nonlinearity.p_value > 0.001
    assert effect.association.p_value < 1e-6  # the linear effect itself is strong
