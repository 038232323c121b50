"""AFT models: exponential against statsmodels' Poisson GLM, predictions against lifelines."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from lifelines import LogLogisticAFTFitter, LogNormalAFTFitter, WeibullAFTFitter
from numpy.testing import assert_allclose

from engine.errors import AnalysisError, RoleError
from engine.parametric.aft import compare_aft, fit_aft


@pytest.fixture
def cohort(rng):
    n = 500
    age = rng.normal(60, 10, n)
    arm = pd.Categorical(rng.choice(["control", "new"], n), categories=["control", "new"])
    scale = np.exp(2.0 + 0.02 * (age - 60) + 0.4 * (np.asarray(arm) == "new"))
    t = rng.weibull(1.3, n) * scale
    c = rng.uniform(0, 30, n)
    age[:7] = np.nan  # complete-case handling
    return pd.DataFrame(
        {"_time": np.minimum(t, c), "_event": (t <= c).astype(int), "age": age, "arm": arm}
    )


def test_exponential_aft_matches_statsmodels_poisson_glm(cohort):
    # Exponential survival with log-linear hazard is a Poisson GLM on the event indicator with
    # offset log(time); its coefficients are minus the AFT coefficients, with equal standard
    # errors (statsmodels GLM, family Poisson, log link).
    fit = fit_aft(cohort, ["age", "arm"], "exponential")
    cc = cohort.dropna()
    x = sm.add_constant(
        np.column_stack([cc["age"], (cc["arm"] == "new").astype(float)]), has_constant="add"
    )
    glm = sm.GLM(cc["_event"], x, family=sm.families.Poisson(), offset=np.log(cc["_time"])).fit()
    assert_allclose(fit.coefficients["coef"], -glm.params, rtol=1e-7)
    assert_allclose(fit.coefficients["std_error"], glm.bse, rtol=1e-6)
    # Poisson log-likelihood = ours + sum(d log t) - sum(log d!) (d! = 1 for 0/1).
    assert_allclose(
        fit.log_likelihood + (cc["_event"] * np.log(cc["_time"])).sum(), glm.llf, rtol=1e-10
    )
    assert fit.rows_dropped == 7 and fit.missing_by_covariate == {"age": 7, "arm": 0}
    assert list(fit.coefficients["term"]) == ["Intercept", "age", "arm: new vs control"]


def _reference_design(cohort) -> pd.DataFrame:
    """The complete cases with the arm as a 0/1 column, for the reference library's fitters."""
    cc = cohort.dropna()
    return pd.DataFrame(
        {
            "age": cc["age"],
            "arm_new": (cc["arm"] == "new").astype(float),
            "_time": cc["_time"],
            "_event": cc["_event"],
        }
    )


@pytest.mark.parametrize(
    "distribution, fitter",
    [
        ("weibull", WeibullAFTFitter),
        ("log-normal", LogNormalAFTFitter),
        ("log-logistic", LogLogisticAFTFitter),
    ],
)
def test_predictions_match_lifelines(cohort, distribution, fitter):
    # Our survival and median predictions are rebuilt from the coefficients; lifelines'
    # predict_survival_function / predict_median on the same rows are the reference.
    fit = fit_aft(cohort, ["age", "arm"], distribution)
    data = _reference_design(cohort)
    ref = fitter().fit(data, "_time", "_event")
    profiles = pd.DataFrame(
        {"age": [45.0, 70.0], "arm": pd.Categorical(["control", "new"], ["control", "new"])}
    )
    ref_rows = pd.DataFrame({"age": [45.0, 70.0], "arm_new": [0.0, 1.0]})
    times = np.array([1.0, 5.0, 12.0])
    ours = fit.survival(profiles, times)
    ref_surv = ref.predict_survival_function(ref_rows, times=times).to_numpy()  # (times, rows)
    assert_allclose(ours["survival"].to_numpy(), ref_surv.T.reshape(-1), rtol=1e-9)
    assert_allclose(fit.median(profiles), ref.predict_median(ref_rows).to_numpy(), rtol=1e-6)
    assert_allclose(fit.log_likelihood, ref.log_likelihood_, rtol=1e-12)
    assert fit.coefficients.set_index("term").loc["arm: new vs control", "time_ratio"] > 1


def test_weibull_aft_nests_exponential(cohort):
    table = compare_aft(cohort, ["age", "arm"]).aic_table.set_index("distribution")
    assert table.loc["weibull", "log_likelihood"] >= table.loc["exponential", "log_likelihood"]
    assert table["delta_aic"].min() == 0
    assert_allclose(
        table["aic"], -2 * table["log_likelihood"] + 2 * table["n_parameters"], rtol=1e-12
    )


def test_results_json_and_typical_profile(cohort):
    result = compare_aft(cohort, ["age", "arm"], ("exponential", "weibull"))
    json.dumps(result.to_dict(), allow_nan=False)
    fit = result.fits[1]
    profile = fit.typical_profile(cohort)
    assert profile.loc[0, "arm"] == "control"
    assert profile.loc[0, "age"] == pytest.approx(cohort["age"].mean())


def test_bad_covariates_raise_clear_errors(cohort):
    with pytest.raises(RoleError, match="'weight'"):
        fit_aft(cohort, ["weight"])
    with pytest.raises(AnalysisError, match="at least one covariate"):
        fit_aft(cohort, [])
    fit = fit_aft(cohort, ["arm"], "exponential")
    unknown = pd.DataFrame({"arm": ["placebo"]})
    with pytest.raises(RoleError, match="placebo"):
        fit.median(unknown)


def test_aft_shape_is_on_its_own_scale_as_lifelines_fits_it(cohort):
    # lifelines models the Weibull shape on the log scale (rho_ intercept); Hazel reports
    # exp() of it, named "shape", with the interval transformed back.
    fit = fit_aft(cohort, ["age", "arm"], "weibull")
    data = _reference_design(cohort)
    ref = WeibullAFTFitter().fit(data, "_time", "_event")
    log_shape = float(ref.params_.loc[("rho_", "Intercept")])
    (row,) = fit.ancillary.itertuples(index=False)
    assert row.parameter == "shape"
    assert_allclose(row.estimate, np.exp(log_shape), rtol=1e-6)
    assert row.lower < row.estimate < row.upper
    assert "shape" in fit.to_dict()["parametrisation"]
