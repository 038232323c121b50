"""Cox model fit and tests, checked against published results and statsmodels PHReg.

statsmodels (test-only) is the reference for coefficients, standard errors and log partial
likelihoods: ``PHReg(time, X, status=event, ties=..., strata=..., entry=...).fit()``.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter
from lifelines.datasets import load_rossi
from scipy import stats
from statsmodels.duration.hazard_regression import PHReg

from engine.cox.fit import cox_json, fit_cox
from engine.cox.summaries import forest_data, level_profiles, predict_survival, univariable_screen
from engine.errors import AnalysisError

ROSSI_COVARIATES = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


@pytest.fixture(scope="module")
def rossi():
    return load_rossi().rename(columns={"week": "_time", "arrest": "_event"})


def freireich() -> pd.DataFrame:
    """Freireich et al. (1963) 6-MP remission data (weeks; + = censored)."""
    drug = [
        "6",
        "6",
        "6",
        "6+",
        "7",
        "9+",
        "10",
        "10+",
        "11+",
        "13",
        "16",
        "17+",
        "19+",
        "20+",
        "22",
        "23",
        "25+",
        "32+",
        "32+",
        "34+",
        "35+",
    ]
    placebo = [1, 1, 2, 2, 3, 4, 4, 5, 5, 8, 8, 8, 8, 11, 11, 12, 12, 15, 17, 22, 23]
    times = [float(v.rstrip("+")) for v in drug] + [float(v) for v in placebo]
    events = [0 if v.endswith("+") else 1 for v in drug] + [1] * len(placebo)
    return pd.DataFrame(
        {"_time": times, "_event": events, "placebo": [0.0] * len(drug) + [1.0] * len(placebo)}
    )


def statsmodels_fit(frame, columns, ties, strata=None, entry=None):
    model = PHReg(
        frame["_time"].to_numpy(),
        frame[columns].to_numpy(dtype=float),
        status=frame["_event"].to_numpy(),
        ties=ties,
        strata=None if strata is None else frame[strata].to_numpy(),
        entry=None if entry is None else frame[entry].to_numpy(),
    )
    return model, model.fit()


def simulated(rng, n=400):
    """Seeded data with heavy ties (integer times), a 3-level categorical and strata."""
    x1 = rng.normal(size=n)
    x2 = rng.uniform(0, 2, n)
    group = rng.choice(["low", "mid", "high"], n, p=[0.4, 0.35, 0.25])
    stratum = rng.choice(["s1", "s2"], n)
    lp = 0.5 * x1 - 0.3 * x2 + np.where(group == "mid", 0.4, np.where(group == "high", 0.9, 0))
    latent = rng.exponential(1 / np.exp(lp)) * 10
    censor = rng.uniform(2, 25, n)
    return pd.DataFrame(
        {
            "_time": np.ceil(np.minimum(latent, censor)),
            "_event": (latent <= censor).astype(int),
            "x1": x1,
            "x2": x2,
            "group": pd.Categorical(group, categories=["low", "mid", "high"]),
            "_strata": pd.Categorical(stratum),
            "mid": (group == "mid").astype(float),
            "high": (group == "high").astype(float),
        }
    )


def test_rossi_efron_matches_fox_weisberg_2018(rossi):
    # Fox & Weisberg (2018), "Cox Proportional-Hazards Regression for Survival Data in R",
    # appendix to An R Companion to Applied Regression (3rd ed.): Efron coefficients.
    published = [-0.3794, -0.0574, 0.3139, -0.1498, -0.4337, -0.0849, 0.0915]
    result = fit_cox(rossi, ROSSI_COVARIATES)
    np.testing.assert_allclose(result.to_frame()["coef"], published, atol=5e-5)
    # Likelihood-ratio test 33.27 on 7 df (from memory), confirmed with statsmodels below.
    assert result.likelihood_ratio.statistic == pytest.approx(33.27, abs=0.005)
    assert result.likelihood_ratio.df == 7
    model, fit = statsmodels_fit(rossi, ROSSI_COVARIATES, "efron")
    null = model.loglike(np.zeros(7))
    assert result.likelihood_ratio.statistic == pytest.approx(2 * (fit.llf - null), abs=1e-6)
    assert result.aic == pytest.approx(-2 * fit.llf + 14, abs=1e-6)
    np.testing.assert_allclose(result.to_frame()["se"], fit.bse, rtol=1e-5)


@pytest.mark.parametrize(
    ("ties", "coef", "hazard_ratio"), [("breslow", 1.509, 4.52), ("efron", 1.572, 4.82)]
)
def test_freireich_treatment_effect(ties, coef, hazard_ratio):
    # Freireich et al. (1963) 6-MP trial, placebo vs 6-MP: published textbook values
    # (Breslow 1.509, HR 4.52; Efron 1.572, HR 4.82), confirmed with statsmodels PHReg.
    frame = freireich()
    result = fit_cox(frame, ["placebo"], ties=ties)
    term = result.terms[0]
    assert term.coef == pytest.approx(coef, abs=5e-4)
    assert term.hazard_ratio == pytest.approx(hazard_ratio, abs=5e-3)
    _, fit = statsmodels_fit(frame, ["placebo"], ties)
    assert term.coef == pytest.approx(fit.params[0], abs=1e-6)
    assert result.loglik == pytest.approx(fit.llf, abs=1e-6)


@pytest.mark.parametrize("ties", ["efron", "breslow"])
@pytest.mark.parametrize("with_strata", [False, True], ids=["unstratified", "stratified"])
def test_matches_statsmodels_on_tied_data_with_categorical(rng, ties, with_strata):
    frame = simulated(rng)
    strata = "_strata" if with_strata else None
    result = fit_cox(frame, ["x1", "group", "x2"], categorical=["group"], ties=ties, strata=strata)
    model, fit = statsmodels_fit(frame, ["x1", "mid", "high", "x2"], ties, strata=strata)
    table = result.to_frame()
    np.testing.assert_allclose(table["coef"], fit.params, atol=1e-5)
    np.testing.assert_allclose(table["se"], fit.bse, atol=1e-5)
    assert result.loglik == pytest.approx(fit.llf, abs=1e-6)
    assert list(table["level"]) == [None, "mid", "high", None]
    assert list(table["reference"]) == [None, "low", "low", None]
    # Score test at beta = 0 from statsmodels' score and Hessian: U' (-H)^-1 U.
    u = model.score(np.zeros(4))
    score = u @ np.linalg.solve(-model.hessian(np.zeros(4)), u)
    assert result.score.statistic == pytest.approx(score, rel=1e-8)
    wald = fit.params @ np.linalg.solve(fit.cov_params(), fit.params)
    assert result.wald.statistic == pytest.approx(wald, rel=1e-6)
    # Joint Wald test of the categorical's two levels.
    b, v = fit.params[1:3], fit.cov_params()[1:3, 1:3]
    (joint,) = result.variable_wald
    assert joint.variable == "group" and joint.df == 2
    assert joint.statistic == pytest.approx(b @ np.linalg.solve(v, b), rel=1e-6)
    z = table["coef"] / table["se"]
    np.testing.assert_allclose(table["p_value"], 2 * stats.norm.sf(np.abs(z)))


def test_delayed_entry_matches_statsmodels(rng):
    frame = simulated(rng)
    # Entry times never equal an event time: statsmodels counts a subject entering at an event
    # time as at risk then, the counting-process convention (used here) does not.
    frame["_entry"] = np.floor(frame["_time"] * rng.uniform(0, 0.9, len(frame))) + 0.5
    frame.loc[frame["_entry"] >= frame["_time"], "_entry"] = 0.0
    for ties, strata in [("efron", None), ("breslow", None), ("efron", "_strata")]:
        result = fit_cox(frame, ["x1", "x2", "group"], ties=ties, entry="_entry", strata=strata)
        _, fit = statsmodels_fit(
            frame, ["x1", "x2", "mid", "high"], ties, entry="_entry", strata=strata
        )
        np.testing.assert_allclose(result.to_frame()["coef"], fit.params, atol=1e-5)
        np.testing.assert_allclose(result.to_frame()["se"], fit.bse, atol=1e-5)
        assert result.loglik == pytest.approx(fit.llf, abs=1e-6)


def test_delayed_entry_matches_lifelines(rng):
    # lifelines CoxPHFitter(entry_col=...) uses Efron ties; continuous times.
    frame = simulated(rng)
    frame["_time"] = frame["_time"] + rng.uniform(0, 0.5, len(frame))
    frame["_entry"] = frame["_time"] * rng.uniform(0, 0.8, len(frame))
    result = fit_cox(frame, ["x1", "x2"], entry="_entry")
    reference = CoxPHFitter().fit(
        frame[["_time", "_event", "_entry", "x1", "x2"]], "_time", "_event", entry_col="_entry"
    )
    np.testing.assert_allclose(result.to_frame()["coef"], reference.params_, atol=1e-5)


def test_without_each_matches_statsmodels_refits(rng):
    frame = simulated(rng)
    result = fit_cox(frame, ["x1", "group", "x2"], ties="breslow")
    _, full = statsmodels_fit(frame, ["x1", "mid", "high", "x2"], "breslow")
    for test, kept, df in [
        (result.without_each[0], ["mid", "high", "x2"], 1),
        (result.without_each[1], ["x1", "x2"], 2),
        (result.without_each[2], ["x1", "mid", "high"], 1),
    ]:
        _, reduced = statsmodels_fit(frame, kept, "breslow")
        assert test.statistic == pytest.approx(2 * (full.llf - reduced.llf), abs=1e-6)
        assert test.df == df
    assert [t.variable for t in result.without_each] == ["x1", "group", "x2"]


def test_complete_cases_and_dropped_counts(rng):
    frame = simulated(rng)
    frame.loc[frame.index[:7], "x1"] = np.nan
    frame.loc[frame.index[5:9], "group"] = np.nan
    result = fit_cox(frame, ["x1", "group"])
    assert result.dropped == {"x1": 7, "group": 4}
    assert result.n == len(frame) - 9
    complete = frame.iloc[9:]
    _, fit = statsmodels_fit(complete, ["x1", "mid", "high"], "efron")
    np.testing.assert_allclose(result.to_frame()["coef"], fit.params, atol=1e-5)


def test_reference_level_override_reparametrises(rng):
    # Exact property: changing the reference re-expresses the same model.
    frame = simulated(rng)
    default = fit_cox(frame, ["group"])
    other = fit_cox(frame, ["group"], reference={"group": "high"})
    assert other.loglik == pytest.approx(default.loglik, abs=1e-9)
    low_vs_high = next(t.coef for t in other.terms if t.level == "low")
    assert low_vs_high == pytest.approx(-default.terms[1].coef, abs=1e-7)
    assert {t.reference for t in other.terms} == {"high"}


def test_univariable_screen_matches_single_covariate_fits(rng):
    frame = simulated(rng)
    result = fit_cox(frame, ["x1", "group"])
    screen = univariable_screen(result).to_frame()
    _, alone = statsmodels_fit(frame, ["mid", "high"], "efron")
    np.testing.assert_allclose(
        screen.loc[screen.variable == "group", "univariable_hazard_ratio"], np.exp(alone.params)
    )
    np.testing.assert_allclose(
        screen["multivariable_hazard_ratio"], result.to_frame()["hazard_ratio"]
    )


def test_forest_rows_have_reference_and_counts(rng):
    frame = simulated(rng)
    result = fit_cox(frame, ["x1", "group"])
    forest = forest_data(result).to_frame()
    group = forest[forest.variable == "group"]
    assert list(group["level"]) == ["low", "mid", "high"]
    assert list(group["is_reference"]) == [True, False, False]
    assert group["hazard_ratio"].iloc[0] == 1.0
    assert group["n"].sum() == result.n
    assert group["events"].sum() == result.events
    for level in ("low", "mid", "high"):
        rows = frame[frame.group == level]
        assert int(group.loc[group.level == level, "n"].iloc[0]) == len(rows)
        assert int(group.loc[group.level == level, "events"].iloc[0]) == rows["_event"].sum()


def test_predicted_survival_matches_lifelines(rossi):
    # lifelines' predict_survival_function uses the Breslow baseline too.
    result = fit_cox(rossi, ROSSI_COVARIATES)
    profile = {"fin": 1, "age": 30, "race": 0, "wexp": 1, "mar": 0, "paro": 1, "prio": 2}
    curve = predict_survival(result, {"chosen": profile}).to_frame().iloc[1:]  # after time 0
    lifelines_frame = rossi.rename(columns={"_time": "week", "_event": "arrest"})
    fitter = CoxPHFitter().fit(lifelines_frame, "week", "arrest")
    expected = fitter.predict_survival_function(pd.DataFrame([profile]), times=curve["time"])
    np.testing.assert_allclose(curve["survival"], expected.iloc[:, 0], atol=1e-6)


def test_predicted_survival_per_stratum_and_levels(rng):
    frame = simulated(rng)
    result = fit_cox(frame, ["x1", "group"], strata="_strata")
    curves = predict_survival(result, level_profiles(result, "group")).to_frame()
    assert set(curves["stratum"]) == {"s1", "s2"}
    assert set(curves["profile"]) == {"group = low", "group = mid", "group = high"}
    for _, curve in curves.groupby(["profile", "stratum"]):
        assert curve["survival"].iloc[0] == 1.0
        assert np.all(np.diff(curve["survival"]) <= 0)


def test_numeric_profiles_use_values_or_quartiles(rossi):
    result = fit_cox(rossi, ROSSI_COVARIATES)
    assert list(level_profiles(result, "fin")) == ["fin = 0", "fin = 1"]
    ages = [p["age"] for p in level_profiles(result, "age").values()]
    np.testing.assert_allclose(ages, np.quantile(rossi["age"], [0.25, 0.5, 0.75]))
    assert level_profiles(result, "fin")["fin = 1"]["prio"] == pytest.approx(rossi["prio"].mean())


def test_json_contract(rossi):
    result = fit_cox(rossi, ROSSI_COVARIATES)
    out = cox_json(result)
    json.dumps(out)
    assert set(out) >= {
        "n", "events", "ties", "terms", "likelihood_ratio", "wald", "score", "concordance",
        "without_each", "ph_check", "warnings",
    }  # fmt: skip
    assert set(out["terms"][0]) == {
        "variable", "level", "reference", "coef", "se", "se_model", "hazard_ratio", "lower",
        "upper", "p_value",
    }  # fmt: skip
    assert out["variance"] == "model" and out["clusters"] is None
    assert out["n"] == 432 and out["events"] == 114 and out["ties"] == "efron"
    assert set(out["likelihood_ratio"]) == {"statistic", "df", "p_value"}
    assert cox_json(None) is None


def test_level_without_events_warns_of_infinite_coefficient(rng):
    frame = simulated(rng)
    frame["site"] = pd.Categorical(np.where(np.arange(len(frame)) % 4 == 0, "B", "A"))
    frame.loc[frame["site"] == "B", "_event"] = 0
    result = fit_cox(frame, ["x1", "site"])
    assert any("site: B" in w and "infinity" in w for w in result.warnings)


def test_few_events_per_parameter_and_small_level_warn(rng):
    frame = simulated(rng, n=60)
    frame["tiny"] = pd.Categorical(
        np.where(np.arange(60) < 3, "rare", "common"), ["common", "rare"]
    )
    result = fit_cox(frame, ["x1", "x2", "group", "tiny"])
    assert any("events per model parameter" in w for w in result.warnings)
    assert any("'tiny'" in w and "'rare' (3 rows)" in w for w in result.warnings)


def test_non_convergence_warns(rossi):
    result = fit_cox(rossi, ROSSI_COVARIATES, max_iterations=1)
    assert not result.converged
    assert any("did not converge" in w for w in result.warnings)


def test_near_collinear_covariates_warn(rng):
    frame = simulated(rng)
    frame["x1_copy"] = frame["x1"] + rng.normal(scale=0.01, size=len(frame))
    result = fit_cox(frame, ["x1", "x1_copy"])
    assert any("'x1_copy'" in w and "collinear" in w for w in result.warnings)


@pytest.mark.parametrize(
    ("change", "covariates", "message"),
    [
        (lambda f: f.assign(const=2.0), ["x1", "const"], "const"),
        (lambda f: f.assign(twice=2 * f["x1"] + 1), ["x1", "twice"], "twice"),
        (lambda f: f.assign(word=["a", "b"] * 200), ["word"], "word"),
        (lambda f: f.assign(_event=0), ["x1"], "event"),
        (lambda f: f, ["missing_column"], "missing_column"),
        (lambda f: f.assign(_entry=f["_time"]), ["x1"], "entry time is at or after"),
    ],
    ids=["constant", "collinear", "not-numeric", "no-events", "unknown-column", "late-entry"],
)
def test_unfittable_models_raise_naming_the_problem(rng, change, covariates, message):
    frame = change(simulated(rng))
    entry = "_entry" if "_entry" in frame else None
    with pytest.raises(AnalysisError, match=message):
        fit_cox(frame, covariates, entry=entry)


def test_unknown_reference_level_raises(rng):
    with pytest.raises(AnalysisError, match="'group'"):
        fit_cox(simulated(rng), ["group"], reference={"group": "none"})


def test_runaway_is_flagged_where_the_information_is_gone():
    """A monotone likelihood (exact property: in stratum B the one event is the older of the two
    at risk, so log L = 70.4 b - log(exp(70.4 b) + exp(64.3 b)) rises for ever in b; stratum A
    has one row) is flagged as a runaway even where Newton stops with the curvature rounded to
    zero or below (strata with delayed entry), not only where its last step is still large."""
    frame = pd.DataFrame(
        {
            "_time": [7.0, 7.0, 7.0],
            "_event": [1, 1, 0],
            "_entry": [2.0, 1.0, 0.0],
            "ward": ["B", "A", "B"],
            "age": [70.4, 57.8, 64.3],
        }
    )
    for options in ({"strata": "ward"}, {"strata": "ward", "entry": "_entry"}):
        result = fit_cox(frame, ["age"], **options)
        assert any("run off to infinity" in w for w in result.warnings), options


def test_wald_statistic_on_a_singular_covariance_is_not_computed():
    """b' V^-1 b, and NaN (null in the JSON) where V is singular instead of numpy's LinAlgError
    (a joint test of a categorical whose levels ran off, before those were left out)."""
    from engine.cox.fit import wald_statistic

    b = np.array([1.0, -2.0])
    covariance = np.array([[2.0, 0.5], [0.5, 1.0]])
    assert wald_statistic(b, covariance) == pytest.approx(b @ np.linalg.inv(covariance) @ b)
    assert np.isnan(wald_statistic(b, np.array([[1.0, 1.0], [1.0, 1.0]])))
