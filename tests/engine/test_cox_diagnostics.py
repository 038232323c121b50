"""Cox diagnostics checked against lifelines (scaled Schoenfeld residuals, its
``proportional_hazard_test``, martingale residuals, Kaplan–Meier) and against the
Grambsch–Therneau (1994) global statistic computed from lifelines' own residuals."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter, KaplanMeierFitter
from lifelines.datasets import load_rossi
from lifelines.statistics import proportional_hazard_test

from engine.cox.diagnostics import (
    log_minus_log,
    martingale_residuals,
    proportional_hazards_test,
    schoenfeld_residuals,
    transform_times,
)
from engine.cox.fit import cox_json, fit_cox
from engine.errors import AnalysisError

COVARIATES = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


@pytest.fixture(scope="module")
def rossi_fits():
    rossi = load_rossi()
    ours = fit_cox(rossi.rename(columns={"week": "_time", "arrest": "_event"}), COVARIATES)
    theirs = CoxPHFitter().fit(rossi, "week", "arrest")
    return rossi, ours, theirs


def untied(rng, n=250, strata=False):
    """Continuous times (no ties), a 3-level categorical as dummies."""
    x1 = rng.normal(size=n)
    level = rng.choice(["a", "b", "c"], n)
    lp = 0.6 * x1 + np.where(level == "b", 0.5, np.where(level == "c", -0.4, 0))
    latent = rng.weibull(1.5, n) / np.exp(lp / 1.5)
    censor = rng.uniform(0.2, 2.5, n)
    frame = pd.DataFrame(
        {
            "_time": np.minimum(latent, censor),
            "_event": (latent <= censor).astype(int),
            "x1": x1,
            "level": pd.Categorical(level, ["a", "b", "c"]),
            "b": (level == "b").astype(float),
            "c": (level == "c").astype(float),
        }
    )
    if strata:
        frame["_strata"] = pd.Categorical(rng.choice(["s1", "s2"], n))
    return frame


def test_scaled_schoenfeld_match_lifelines_with_tied_times(rossi_fits):
    # lifelines leaves beta out of its scaled residuals; we add it (as in Grambsch–Therneau).
    rossi, ours, theirs = rossi_fits
    mine = schoenfeld_residuals(ours).to_frame().set_index("row").sort_index()
    reference = theirs.compute_residuals(rossi, "scaled_schoenfeld").sort_index()
    np.testing.assert_allclose(mine[COVARIATES], reference + theirs.params_.values, atol=1e-6)


# Hazel's time scales and the reference library's argument for the same scale.
REFERENCE_TRANSFORM = {"time": "identity", "log-time": "log", "rank": "rank"}


@pytest.mark.parametrize("time_scale", ["time", "log-time"])
def test_ph_statistics_match_lifelines_on_rossi(rossi_fits, time_scale):
    rossi, ours, theirs = rossi_fits
    reference = proportional_hazard_test(
        theirs, rossi, time_transform=REFERENCE_TRANSFORM[time_scale]
    )
    mine = proportional_hazards_test(ours, time_scale)
    np.testing.assert_allclose([t.statistic for t in mine.terms], reference.test_statistic, 1e-6)
    np.testing.assert_allclose([t.p_value for t in mine.terms], reference.p_value, 1e-6)


@pytest.mark.parametrize("time_scale", ["rank", "survival", "time"])
def test_ph_statistics_match_lifelines_without_ties(rng, time_scale):
    frame = untied(rng)
    ours = fit_cox(frame, ["x1", "b", "c"])
    data = frame[["_time", "_event", "x1", "b", "c"]]
    theirs = CoxPHFitter().fit(data, "_time", "_event")

    def left_km(t, c, w):
        # Grambsch–Therneau's km scale: 1 - KM just before t (lifelines' own "km" is the
        # right-continuous KM); the KM itself is lifelines'.
        km = KaplanMeierFitter().fit(t, c)
        before = km.survival_function_at_times(np.asarray(t) - 1e-9).to_numpy()
        return pd.Series(1 - before, index=t.index)

    lifelines_transform = left_km if time_scale == "survival" else REFERENCE_TRANSFORM[time_scale]
    reference = proportional_hazard_test(theirs, data, time_transform=lifelines_transform)
    mine = proportional_hazards_test(ours, time_scale)
    # lifelines stops its Newton iterations a little earlier here (coefficients differ ~1e-6).
    np.testing.assert_allclose([t.statistic for t in mine.terms], reference.test_statistic, 1e-4)


def grambsch_therneau(g, raw, covariance, columns):
    """T_J = u_J' V_JJ^-1 u_J / (d sum g~^2), u = d V sum g~ r (Grambsch & Therneau 1994)."""
    g = g - g.mean()
    d = len(g)
    u = d * covariance @ (g @ raw)
    block = covariance[np.ix_(columns, columns)]
    return u[columns] @ np.linalg.solve(block, u[columns]) / (d * g @ g)


def test_global_and_joint_tests_from_lifelines_residuals(rng):
    frame = untied(rng)
    ours = fit_cox(frame, ["x1", "level"])
    data = frame[["_time", "_event", "x1", "b", "c"]]
    theirs = CoxPHFitter().fit(data, "_time", "_event")
    raw = theirs.compute_residuals(data, "schoenfeld").sort_index().to_numpy()
    times = data["_time"].sort_index()[data["_event"] == 1].to_numpy()
    covariance = theirs.variance_matrix_.to_numpy()
    mine = proportional_hazards_test(ours, "time")
    expected_all = grambsch_therneau(times, raw, covariance, [0, 1, 2])
    assert mine.all_terms.statistic == pytest.approx(expected_all, rel=1e-5)
    assert mine.all_terms.df == 3
    joint = {t.variable: t for t in mine.variables}
    assert joint["level"].statistic == pytest.approx(
        grambsch_therneau(times, raw, covariance, [1, 2]), rel=1e-5
    )
    assert joint["level"].df == 2
    assert joint["x1"].statistic == pytest.approx(mine.terms[0].statistic)
    assert [t.variable for t in mine.checks] == ["x1", "level", "All terms together"]


def test_schoenfeld_residuals_within_strata_match_lifelines(rng):
    frame = untied(rng, strata=True)
    ours = fit_cox(frame, ["x1", "b", "c"], strata="_strata", ties="efron")
    data = frame[["_time", "_event", "x1", "b", "c", "_strata"]].astype({"_strata": str})
    theirs = CoxPHFitter().fit(data, "_time", "_event", strata=["_strata"])
    np.testing.assert_allclose(ours.to_frame()["coef"], theirs.params_, atol=1e-5)
    mine = schoenfeld_residuals(ours).to_frame().set_index("row").sort_index()
    reference = theirs.compute_residuals(data, "scaled_schoenfeld").sort_index()
    np.testing.assert_allclose(mine[["x1", "b", "c"]], reference + theirs.params_.values, atol=1e-5)


def test_breslow_schoenfeld_residuals_sum_to_zero(rng):
    # Exact property: at the maximum the score, the sum of the Schoenfeld residuals, is 0.
    frame = untied(rng)
    frame["_time"] = np.ceil(frame["_time"] * 10)  # heavy ties
    for ties in ("breslow", "efron"):
        result = fit_cox(frame, ["x1", "level"], ties=ties)
        np.testing.assert_allclose(schoenfeld_residuals(result).raw.sum(axis=0), 0, atol=1e-8)


def test_martingale_residuals_match_lifelines(rossi_fits):
    rossi, ours, theirs = rossi_fits
    residuals = martingale_residuals(ours)
    age = residuals.to_frame().query("variable == 'age'").set_index("row").sort_index()
    reference = theirs.compute_residuals(rossi, "martingale").sort_index()["martingale"]
    np.testing.assert_allclose(age["residual"], reference, atol=1e-6)
    assert age["value"].to_numpy() == pytest.approx(rossi["age"].to_numpy())
    # The null model's residual is event minus the Nelson–Aalen cumulative hazard: sums to 0.
    assert age["residual_null"].sum() == pytest.approx(0, abs=1e-8)
    bins = residuals.bins.query("variable == 'age'")
    assert bins["n"].sum() == len(rossi)


def test_survival_time_scale_is_left_continuous_km(rng):
    time = np.round(rng.exponential(size=100), 1) + 0.1
    event = rng.random(100) < 0.7
    at = np.unique(time[event])
    km = KaplanMeierFitter().fit(time, event)
    expected = 1 - km.survival_function_at_times(at - 1e-9).to_numpy()
    np.testing.assert_allclose(transform_times("survival", at, time, event), expected, atol=1e-12)


def test_log_minus_log_matches_lifelines_kaplan_meier(rossi_fits):
    rossi = rossi_fits[0].rename(columns={"week": "_time", "arrest": "_event"})
    curves = log_minus_log(rossi, "fin").to_frame()
    for level, rows in rossi.groupby("fin"):
        km = KaplanMeierFitter().fit(rows["_time"], rows["_event"])
        mine = curves[curves.level == str(level)]
        expected = km.survival_function_at_times(mine["time"]).to_numpy()
        np.testing.assert_allclose(mine["survival"], expected, atol=1e-12)
        np.testing.assert_allclose(mine["log_minus_log"], np.log(-np.log(expected)))


def test_json_ph_check_has_time_scale_terms_and_all_terms(rossi_fits):
    _, ours, _ = rossi_fits
    ph = proportional_hazards_test(ours)
    check = cox_json(ours, ph)["ph_check"]
    assert cox_json(ours, ph.to_dict())["ph_check"] == check
    assert list(check) == ["time_scale", "terms", "all_terms"]
    assert check["time_scale"] == "survival"
    assert [c["variable"] for c in check["terms"]] == COVARIATES
    assert all(set(c) == {"variable", "statistic", "df", "p_value"} for c in check["terms"])
    assert set(check["all_terms"]) == {"statistic", "df", "p_value"}
    assert check["all_terms"]["df"] == 7


def test_unknown_transform_raises(rossi_fits):
    with pytest.raises(AnalysisError, match="squared"):
        proportional_hazards_test(rossi_fits[1], "squared")


def test_a_singular_block_gives_no_test_instead_of_an_error():
    """Found by the fuzz suite: a covariate equal to the time makes the PH check's information
    block singular; the check then reports no test (NaN, shown as not estimable)."""
    from engine.analysis.run import run_analysis
    from engine.prepare.checks import prepare
    from engine.prepare.roles import Roles

    times = np.round(np.arange(1, 16) / 3, 3)
    frame = pd.DataFrame(
        {
            "futime": times,
            "status": [1, 0, 0, 0, 1, 1, 0, 0, 0, 1, 1, 0, 0, 0, 1],
            "arm": [1.0] + [0.0] * 14,
            "start": times,
        }
    )
    roles = Roles(time="futime", event="status", group="arm", covariates=("start",))
    sections = run_analysis(prepare(frame, roles), None, frame)
    all_terms = sections["cox"]["ph_check"]["all_terms"]
    assert all_terms["statistic"] is None and all_terms["p_value"] is None
