"""Values at the edge of floating point give "not estimable" (NaN, null in the JSON) without a
numeric warning reaching the user's terminal, and never a misleading number (a standard error of
0, a p-value of 0, a mean over a grid of no width). Checked by exact properties."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from engine.analysis.baseline import baseline_table
from engine.parametric.fits import standard_errors
from engine.prediction.performance import CoxPredictions, integrate


@pytest.fixture(autouse=True)
def numeric_warnings_fail():
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        yield


def test_standard_errors_are_square_roots_of_positive_finite_variances_only():
    got = standard_errors([4.0, 2.25, 0.0, -1e-12, np.inf, np.nan])
    assert_array_equal(got[:2], [2.0, 1.5])
    assert np.isnan(got[2:]).all()  # never 0: a zero SE would give p = 0 and a zero-width CI


def test_integrate_is_the_trapezoid_mean_and_undefined_on_a_single_time():
    assert integrate([0.0, 1.0, 2.0], [0.0, 1.0, 0.0]) == pytest.approx(0.5)  # area 1 over 2
    assert np.isnan(integrate([5.0], [0.2]))
    assert np.isnan(integrate([5.0, 5.0], [0.2, 0.3]))


def test_predicted_survival_with_a_linear_predictor_beyond_floats():
    predictions = CoxPredictions(
        time=np.array([1.0, 2.0]),
        event=np.array([1, 0]),
        stratum=np.array([0, 0]),
        linear_predictor=np.array([800.0, 0.0]),  # exp(800) overflows
        baseline_times=(np.array([1.0]),),
        baseline_cumulative=(np.array([0.5]),),
    )
    assert_array_equal(predictions.survival(0.5), [1.0, 1.0])  # before the first event time
    assert_allclose(predictions.survival(2.0), [0.0, np.exp(-0.5)])


def test_baseline_mean_and_sd_of_values_whose_squares_overflow_are_not_estimable():
    values = pd.DataFrame({"dose": [1e200, 2e200, 3e200], "age": [50.0, 60.0, 70.0]})
    rows = baseline_table(values, summary="mean").to_frame().set_index("variable")
    assert rows.loc["dose", "mean"] == pytest.approx(2e200)
    assert rows.loc["dose", "sd"] is None or np.isnan(rows.loc["dose", "sd"])  # (1e200)² overflows
    assert rows.loc["age", "sd"] == pytest.approx(10.0)  # pandas' n − 1 SD of 50, 60, 70
