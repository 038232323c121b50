"""Fine–Gray regression against a weighted Cox fit of lifelines on the expanded data of Geskus
(2011, Biometrics 67:39–49), and exact properties."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import CoxPHFitter
from numpy.testing import assert_allclose

from engine.competing.fine_gray import fit_fine_gray
from engine.cox.fit import fit_cox
from engine.errors import AnalysisError

TIGHT = {"precision": 1e-12, "max_steps": 200}


def _sample(rng, n=300, tied=False, competing=True):
    """Relapse depends on x0, death (the competing cause) on the group; uniform censoring."""
    x0 = rng.normal(size=n)
    arm = rng.choice(["control", "new"], n)
    t1 = rng.exponential(10.0 * np.exp(-0.5 * x0))
    t2 = rng.exponential(12.0 * np.exp(0.4 * (arm == "new"))) if competing else np.inf
    censor = rng.uniform(0.0, 25.0, n)
    time = np.minimum.reduce([t1, np.broadcast_to(t2, n), censor])
    status = np.select([time == t1, time == t2], [1, 2], 0)
    if tied:
        time = np.ceil(time)
    cause = np.where(status == 1, "relapse", np.where(status == 2, "death", None))
    frame = pd.DataFrame(
        {"_time": time, "_cause": cause, "x0": x0, "arm": pd.Categorical(arm, ["control", "new"])}
    )
    return frame, status


def geskus_expanded(time, status, x):
    """The expanded data, written out independently of the engine with plain loops.

    Censoring distribution G: Kaplan–Meier of the censoring times, events taken to come first
    at tied times. A subject with the cause or censored keeps one row (0, T]. A subject with a
    competing event at T has the row (0, T] of weight 1 and then rows from T up to and between
    the later censoring times, each of weight G(start) / G(T-), where G(start) is G just after
    the interval's start, the value G(t-) holds for every t in the interval."""
    n = len(time)
    distinct = np.unique(time)
    survival, g = [], 1.0
    for t in distinct:
        at_risk = np.sum(time >= t) - np.sum((time == t) & (status > 0))
        censored = np.sum((time == t) & (status == 0))
        if censored:
            g *= 1.0 - censored / at_risk
        survival.append(g)

    def g_after(t):
        i = np.searchsorted(distinct, t, side="right") - 1
        return 1.0 if i < 0 else survival[i]

    def g_before(t):
        i = np.searchsorted(distinct, t, side="left") - 1
        return 1.0 if i < 0 else survival[i]

    censor_times = np.unique(time[status == 0])
    end = time.max() + 1.0
    rows = []
    for i in range(n):
        rows.append((i, 0.0, time[i], int(status[i] == 1), 1.0))
        if status[i] != 2:
            continue
        starts = [time[i], *[c for c in censor_times if c > time[i]]]
        for start, stop in zip(starts, [*starts[1:], end], strict=True):
            weight = g_after(start) / g_before(time[i])
            if weight > 0:
                rows.append((i, start, stop, 0, weight))
    out = pd.DataFrame(rows, columns=["id", "start", "stop", "event", "weight"])
    for j in range(x.shape[1]):
        out[f"x{j}"] = x[out["id"].to_numpy(), j]
    return out


def _lifelines_expanded(frame, status):
    x = np.column_stack([frame["x0"], (frame["arm"] == "new").astype(float)])
    data = geskus_expanded(frame["_time"].to_numpy(), status, x)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # non-integer weights: lifelines suggests robust SEs
        return CoxPHFitter().fit(
            data.drop(columns="id"),
            "stop",
            "event",
            weights_col="weight",
            entry_col="start",
            fit_options=TIGHT,
        )


@pytest.mark.parametrize("tied", [False, True], ids=["no ties", "tied times (Efron)"])
def test_equals_a_weighted_delayed_entry_cox_fit_of_the_expanded_data(rng, tied):
    frame, status = _sample(rng, tied=tied)
    ours = fit_fine_gray(frame, ["x0", "arm"], "relapse").to_frame()
    reference = _lifelines_expanded(frame, status)
    assert_allclose(ours["coef"], reference.params_.to_numpy(), atol=1e-6)
    # the model-based standard error is the weighted fit's inverse information
    assert_allclose(ours["se_model"], reference.standard_errors_.to_numpy(), rtol=1e-6)


def test_without_competing_events_it_is_the_cox_model_with_robust_errors(rng):
    """No competing events: the Fine–Gray model is the Cox model; its robust standard errors are
    lifelines' sandwich estimate (no tied times, where the two agree on the score residuals)."""
    frame, _ = _sample(rng, competing=False)
    ours = fit_fine_gray(frame, ["x0", "arm"], "relapse").to_frame()
    cox = fit_cox(frame.assign(_event=(frame["_cause"] == "relapse").astype(int)), ["x0", "arm"])
    assert_allclose(ours["coef"], cox.to_frame()["coef"], atol=1e-8)
    assert_allclose(ours["se_model"], cox.to_frame()["se"], rtol=1e-7)
    data = pd.DataFrame(
        {
            "T": frame["_time"],
            "E": (frame["_cause"] == "relapse").astype(int),
            "x0": frame["x0"],
            "arm": (frame["arm"] == "new").astype(float),
        }
    )
    reference = CoxPHFitter().fit(data, "T", "E", robust=True, fit_options=TIGHT)
    assert_allclose(ours["se"], reference.standard_errors_.to_numpy(), rtol=1e-6)


def test_predicted_incidence_follows_the_baseline(rng):
    frame, _ = _sample(rng)
    result = fit_fine_gray(frame, ["x0", "arm"], "relapse")
    curves = result.predict_incidence({"low": {"x0": -1.0}, "high": {"x0": 1.0, "arm": "new"}})
    low = curves[curves.profile == "low"]["cumulative_incidence"].to_numpy()
    high = curves[curves.profile == "high"]["cumulative_incidence"].to_numpy()
    assert low[0] == 0 and np.all(np.diff(low) >= 0) and np.all(high >= low)
    # proportional subdistribution hazards: log(-log(1 - F)) differ by a constant, x'b
    beta = result.beta
    gap = np.log(-np.log(1 - high[1:])) - np.log(-np.log(1 - low[1:]))
    assert_allclose(gap, 2 * beta[0] + beta[1], rtol=1e-9)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), split=st.floats(0.1, 0.9))
def test_how_competing_causes_are_named_does_not_matter(seed, split):
    """Splitting the competing events into two named causes leaves the model of the cause of
    interest unchanged: every competing event is treated alike."""
    rng = np.random.default_rng(seed)
    frame, status = _sample(rng, n=120, tied=True)
    first = fit_fine_gray(frame, ["x0", "arm"], "relapse").to_frame()
    other = np.where((status == 2) & (rng.random(len(frame)) < split), "moved", frame["_cause"])
    second = fit_fine_gray(frame.assign(_cause=other), ["x0", "arm"], "relapse").to_frame()
    assert_allclose(second[["coef", "se", "se_model"]], first[["coef", "se", "se_model"]])


def test_json_has_the_documented_keys(rng):
    frame, _ = _sample(rng)
    out = fit_fine_gray(frame, ["x0", "arm"], "relapse").to_dict()
    assert {"cause", "n", "events", "terms"} <= set(out)
    assert out["n"] == len(frame) and out["events"] == int((frame["_cause"] == "relapse").sum())
    assert [t["variable"] for t in out["terms"]] == ["x0", "arm"]
    assert out["terms"][1]["level"] == "new" and out["terms"][1]["reference"] == "control"
    assert {"se", "se_model", "hazard_ratio", "lower", "upper", "p_value"} <= set(out["terms"][0])


def test_errors_name_the_problem(rng):
    frame, _ = _sample(rng, n=60)
    with pytest.raises(AnalysisError, match="'stroke'"):
        fit_fine_gray(frame, ["x0"], "stroke")
    with pytest.raises(AnalysisError, match="delayed entry"):
        fit_fine_gray(frame.assign(_entry=0.0), ["x0"], "relapse")
    with pytest.raises(AnalysisError, match="causes"):
        fit_fine_gray(frame.drop(columns="_cause"), ["x0"], "relapse")


def test_forest_rows_count_rows_and_events_per_level(rng):
    frame, status = _sample(rng)
    rows = fit_fine_gray(frame, ["x0", "arm"], "relapse").forest()
    control, new = rows[rows.variable == "arm"].itertuples(index=False)
    assert control.is_reference and control.hazard_ratio == 1.0
    assert control.n == int((frame["arm"] == "control").sum())
    assert new.events == int(((frame["arm"] == "new") & (status == 1)).sum())


def _bone_marrow():
    """Bone-marrow transplant data shipped with scikit-survival (``load_bmt``: 35 patients,
    ``dis`` the disease type, status 1 relapse, 2 death in remission, 0 censored; whole-month
    times with ties between all three kinds of exit)."""
    from sksurv.datasets import load_bmt

    x, y = load_bmt()
    time = y["ftime"].astype(float)
    status = y["status"].astype(int)
    cause = np.where(status == 1, "relapse", np.where(status == 2, "death", None))
    dis = x["dis"].astype(int).to_numpy().astype(float)
    return pd.DataFrame({"_time": time, "_cause": cause, "dis": dis}), status


@pytest.mark.parametrize("ties", ["breslow", "efron"])
def test_bone_marrow_ties_follow_the_stated_censoring_weights(ties):
    """Weights G(t-) / G(T_i-), G the censoring Kaplan–Meier with events before censorings at
    tied times, checked against the published estimator (Fine and Gray 1999) in Geskus's (2011)
    form: the expanded data written out in ``geskus_expanded`` and fitted by statsmodels' PHReg
    (Breslow; it has no case weights, but in these data only rows without an event carry a
    weight, so log(weight) as an offset is the weighted likelihood) and lifelines' weighted
    Efron fit. Breslow coefficient 0.764457; the standard reverse Kaplan–Meier of censoring
    (censored compared with everybody at risk at a tied time) would give 0.765170, and the other
    G(u±)/G(T_i±) pairings 0.7603–0.7639 (DEVELOPERS.md)."""
    from statsmodels.duration.hazard_regression import PHReg

    frame, status = _bone_marrow()
    ours = fit_fine_gray(frame, ["dis"], "relapse", ties=ties).to_frame()
    data = geskus_expanded(frame["_time"].to_numpy(), status, frame[["dis"]].to_numpy())
    if ties == "breslow":
        # statsmodels counts a row at risk at its own entry time: the times are whole months,
        # so the rows after a competing event, moved to start 1e-6 later, keep every risk set
        # of (start, stop] as it is
        later = data["start"] + 1e-6 * data.duplicated("id")
        reference = PHReg(
            data["stop"], data[["x0"]], status=data["event"], entry=later,
            offset=np.log(data["weight"]), ties="breslow",
        ).fit()  # fmt: skip
        coef, se_model = reference.params, reference.bse
        assert ours["coef"][0] == pytest.approx(0.764457, abs=1e-6)
    else:
        # lifelines refuses rows (0, 0] (two patients left at time 0): first rows start 1e-6
        # before 0, which changes no risk set
        data["start"] -= 1e-6 * ~data.duplicated("id")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # non-integer weights: lifelines suggests robust SEs
            reference = CoxPHFitter().fit(
                data.drop(columns="id"), "stop", "event", weights_col="weight",
                entry_col="start", fit_options=TIGHT,
            )  # fmt: skip
        coef, se_model = reference.params_.to_numpy(), reference.standard_errors_.to_numpy()
    assert_allclose(ours["coef"], coef, atol=1e-6)
    assert_allclose(ours["se_model"], se_model, rtol=1e-6)


def runaway_frame() -> pd.DataFrame:
    """Four terms for three events of cause "a" among 11 rows: the coefficients run off."""
    rng = np.random.default_rng(255)
    n = int(rng.integers(5, 40))
    return pd.DataFrame(
        {
            "_time": rng.integers(1, 8, n).astype(float),
            "_cause": rng.choice(["a", "b", None], n),
            "x": rng.integers(0, 2, n).astype(float), "y": rng.normal(size=n),
            "s": pd.Categorical(rng.choice(list("pqr"), n)),
        }
    )  # fmt: skip


def test_a_runaway_fit_stops_at_finite_estimates_with_model_based_errors():
    """Before: numpy's "SVD did not converge" from Fine–Gray's own Newton loop; now the Cox
    model's loop, which stops at the last finite estimate; the singular sandwich gives way to
    the model-based errors."""
    frame = runaway_frame()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # and no numpy warning on the way
        result = fit_fine_gray(frame, ["x", "y", "s"], "a", categorical=["s"], ties="breslow")
    assert np.isfinite(result.beta).all() and not result.converged
    assert result.variance == "model" and result.to_dict()["variance"] == "model"
    assert any("did not converge" in w for w in result.warnings)
    assert any("sandwich) variance cannot be used here" in w for w in result.warnings)
