"""Prediction performance of a Cox model against scikit-survival (concordance_index_ipcw,
cumulative_dynamic_auc, brier_score, integrated_brier_score), lifelines, and exact properties."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import CoxPHFitter, KaplanMeierFitter
from numpy.testing import assert_allclose
from sksurv.metrics import (
    brier_score,
    concordance_index_censored,
    concordance_index_ipcw,
    cumulative_dynamic_auc,
    integrated_brier_score,
)
from sksurv.util import Surv

from engine.cox.fit import fit_cox
from engine.errors import AnalysisError
from engine.prediction.optimism import bootstrap_optimism
from engine.prediction.performance import cox_predictions, prediction_performance, uno_c

TIMES = [3.0, 6.0, 10.0]


def _cohort(rng, n=400, rounding=1):
    x = rng.normal(size=(n, 2))
    site = rng.integers(0, 3, n)
    t = rng.exponential(10.0 * np.exp(-0.6 * x[:, 0] + 0.3 * (site == 1)))
    censor = rng.uniform(0.0, 25.0, n)
    time = np.round(np.minimum(t, censor), rounding)  # rounded: tied times
    return pd.DataFrame(
        {
            "_time": np.maximum(time, 0.1),
            "_event": (t <= censor).astype(int),
            "x0": x[:, 0],
            "x1": x[:, 1],
            "site": pd.Categorical([f"site {s}" for s in site]),
        }
    )


@pytest.fixture
def fitted(rng):
    return fit_cox(_cohort(rng), ["x0", "x1", "site"])


def _surv(pred):
    return Surv.from_arrays(pred.event.astype(bool), pred.time)


@pytest.mark.parametrize("tau", [None, 12.0], ids=["tau = last time", "tau = 12"])
def test_measures_equal_scikit_survival(fitted, tau):
    result = prediction_performance(fitted, TIMES, tau=tau)
    pred = cox_predictions(fitted)
    y, risk = _surv(pred), pred.linear_predictor
    reference_tau = pred.time.max() if tau is None else tau
    assert_allclose(
        result.uno_c, concordance_index_ipcw(y, y, risk, tau=reference_tau)[0], atol=1e-6
    )
    assert_allclose(result.auc, cumulative_dynamic_auc(y, y, risk, TIMES)[0], atol=1e-6)
    survival = np.column_stack([pred.survival(t) for t in TIMES])
    assert_allclose(result.brier, brier_score(y, y, survival, TIMES)[1], atol=1e-6)
    grid = np.linspace(pred.time.min(), max(TIMES), 100)
    on_grid = np.column_stack([pred.survival(t) for t in grid])
    assert_allclose(result.integrated_brier, integrated_brier_score(y, y, on_grid, grid), atol=1e-6)
    # the reference model: one Kaplan–Meier curve (lifelines) for everybody
    km = KaplanMeierFitter().fit(pred.time, pred.event)
    km_grid = np.tile(km.survival_function_at_times(grid).to_numpy(), (len(y), 1))
    assert_allclose(
        result.integrated_brier_km, integrated_brier_score(y, y, km_grid, grid), atol=1e-6
    )
    km_times = np.tile(km.survival_function_at_times(TIMES).to_numpy(), (len(y), 1))
    assert_allclose(result.brier_km, brier_score(y, y, km_times, TIMES)[1], atol=1e-6)
    assert_allclose(
        result.harrell_c, concordance_index_censored(y["event"], y["time"], risk)[0], atol=1e-9
    )


def test_predicted_survival_equals_lifelines(rng):
    frame = _cohort(rng, rounding=6)  # distinct times: lifelines' Breslow baseline is ours
    result = fit_cox(frame, ["x0", "x1"])
    pred = cox_predictions(result)
    reference = CoxPHFitter().fit(
        frame[["_time", "_event", "x0", "x1"]], "_time", "_event", fit_options={"precision": 1e-12}
    )
    sorted_rows = frame.iloc[result.model.layout.order][["x0", "x1"]]
    # at event times (lifelines interpolates its baseline linearly between them)
    at = np.quantile(pred.time[pred.event], [0.2, 0.5, 0.8], method="lower")
    expected = reference.predict_survival_function(sorted_rows, times=at).to_numpy().T
    assert_allclose(np.column_stack([pred.survival(t) for t in at]), expected, atol=1e-6)


def test_calibration_groups_hold_lifelines_kaplan_meier(fitted):
    result = prediction_performance(fitted, TIMES, calibration_time=6.0, risk_groups=4)
    table = result.calibration
    assert list(table["risk_group"]) == [1, 2, 3, 4] and table["n"].sum() == fitted.n
    pred = cox_predictions(fitted)
    predicted = pred.survival(6.0)
    order = np.argsort(predicted, kind="stable")
    for g, rows in enumerate(np.array_split(order, 4)):
        km = KaplanMeierFitter().fit(pred.time[rows], pred.event[rows])
        assert_allclose(table["observed"][g], km.survival_function_at_times(6.0).iloc[0])
        assert_allclose(table["predicted"][g], predicted[rows].mean())
    assert table["predicted"].is_monotonic_increasing  # group 1 = highest predicted risk


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 10_000), power=st.sampled_from([1, 3]))
def test_uno_c_depends_only_on_the_order_of_the_scores(seed, power):
    """A strictly increasing transform of the risk score leaves Uno's C unchanged, and reversing
    the order of distinct scores turns C into 1 - C; checked against scikit-survival."""
    rng = np.random.default_rng(seed)
    n = 60
    time = np.ceil(rng.exponential(5.0, n))
    event = rng.random(n) < 0.7
    event[np.argmin(time)] = True
    risk = rng.normal(size=n)
    c = uno_c(time, event, risk)
    assert_allclose(uno_c(time, event, np.exp(risk) ** power), c, atol=1e-12)
    y = Surv.from_arrays(event, time)
    assert_allclose(c, concordance_index_ipcw(y, y, risk, tau=time.max())[0], atol=1e-9)
    assert_allclose(uno_c(time, event, -risk), 1.0 - c, atol=1e-12)


def test_bootstrap_optimism_repeats_lifelines_fits(rng):
    """The same resamples (the documented generator calls) refitted with lifelines and scored
    with scikit-survival's Harrell's C give the same optimism and calibration slope."""
    frame = _cohort(rng, n=150, rounding=6)
    result = fit_cox(frame, ["x0", "x1"])
    ours = bootstrap_optimism(result, replicates=8, seed=11)
    layout = result.model.layout
    sorted_frame = frame.iloc[layout.order][["_time", "_event", "x0", "x1"]].reset_index(drop=True)
    draw = np.random.default_rng(11)
    optimism, slopes = [], []
    for _ in range(8):
        rows = draw.integers(0, len(sorted_frame), size=len(sorted_frame))
        sample = sorted_frame.iloc[rows].reset_index(drop=True)
        refit = CoxPHFitter().fit(sample, "_time", "_event", fit_options={"precision": 1e-12})
        own = refit.predict_log_partial_hazard(sample).to_numpy()
        test = refit.predict_log_partial_hazard(sorted_frame).to_numpy()
        c_own = concordance_index_censored(sample["_event"] == 1, sample["_time"], own)[0]
        c_test = concordance_index_censored(
            sorted_frame["_event"] == 1, sorted_frame["_time"], test
        )[0]
        optimism.append(c_own - c_test)
        slope_fit = CoxPHFitter().fit(
            sorted_frame[["_time", "_event"]].assign(score=test), "_time", "_event"
        )
        slopes.append(slope_fit.params_["score"])
    assert_allclose(ours.c_optimism, np.mean(optimism), atol=1e-6)
    assert_allclose(ours.c, result.concordance.concordance - np.mean(optimism), atol=1e-6)
    assert_allclose(ours.slope, np.mean(slopes), atol=1e-5)
    again = bootstrap_optimism(result, replicates=8, seed=11)
    assert again == ours  # seeded: the same replicates every time
    seen = []
    bootstrap_optimism(result, replicates=3, seed=1, progress=lambda done, total: seen.append(done))
    assert seen == [1, 2, 3]


def test_json_layout(fitted):
    result = prediction_performance(fitted, TIMES)
    out = result.to_dict()
    assert out["times"] == TIMES and len(out["auc"]) == len(out["brier"]) == 3
    assert {"integrated_brier", "uno_c", "calibration", "optimism"} <= set(out)
    assert out["tau"] == float(cox_predictions(fitted).time.max())


def test_times_outside_follow_up_are_refused(fitted):
    with pytest.raises(AnalysisError, match="outside the follow-up"):
        prediction_performance(fitted, [5.0, 1e6])
    with pytest.raises(AnalysisError, match="at least one time"):
        prediction_performance(fitted, [])
    with pytest.raises(AnalysisError, match="replicates"):
        bootstrap_optimism(fitted, replicates=0)


def test_integrated_brier_score_is_the_trapezoid_rule_on_the_stated_grid():
    """Leukaemia remission data (Freireich et al. 1963, as shipped with lifelines), Cox model of
    Rx and logWBC, times 5, 10, 15. The integrated Brier score is scikit-survival's
    integrated_brier_score on INTEGRATION_POINTS = 100 evenly spaced times from the first
    observed time to the last chosen time (0.109056; a 101-point grid gives 0.109237). The Brier
    curve is a step function, so the exact mean over that range is a sum over the distinct
    times (0.109180), and the trapezoid rule is within h/2 times its total variation of it."""
    from lifelines.datasets import load_leukemia

    from engine.prediction.performance import INTEGRATION_POINTS

    data = load_leukemia()
    frame = pd.DataFrame(
        {"_time": data["t"].astype(float), "_event": data["status"], "Rx": data["Rx"] * 1.0,
         "logWBC": data["logWBC"]}
    )  # fmt: skip
    fitted = fit_cox(frame, ["Rx", "logWBC"])
    result = prediction_performance(fitted, [5, 10, 15])
    pred = cox_predictions(fitted)
    y = _surv(pred)
    first, last = result.integration_range
    assert (first, last) == (pred.time.min(), 15.0)
    grid = np.linspace(first, last, INTEGRATION_POINTS)
    on_grid = np.column_stack([pred.survival(t) for t in grid])
    assert_allclose(result.integrated_brier, integrated_brier_score(y, y, on_grid, grid), atol=1e-9)
    assert result.integrated_brier == pytest.approx(0.109056, abs=1e-6)
    # the exact mean of the right-continuous step function over [first, last]
    knots = np.unique(np.r_[first, pred.time[(pred.time > first) & (pred.time < last)], last])
    at_knots = np.column_stack([pred.survival(t) for t in knots])
    curve = brier_score(y, y, at_knots, knots)[1]
    exact = float(curve[:-1] @ np.diff(knots)) / (last - first)
    assert exact == pytest.approx(0.109180, abs=1e-6)
    # each grid step holding a jump J of the curve is off by at most |J| h / 2
    step = (last - first) / (INTEGRATION_POINTS - 1)
    variation = np.abs(np.diff(curve)).sum()
    assert abs(result.integrated_brier - exact) <= step / 2 * variation / (last - first)
