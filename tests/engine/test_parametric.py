"""Parametric fits: closed forms, scipy's fits on uncensored data, direct log-likelihoods."""

from __future__ import annotations

import json

import numpy as np
import pytest
from lifelines import WeibullFitter
from numpy.testing import assert_allclose
from scipy import stats

from engine.errors import AnalysisError
from engine.parametric.fits import DISTRIBUTIONS, compare_distributions, fit_distribution


def _censored_weibull(rng, n=600, shape=1.4, scale=10.0):
    t = rng.weibull(shape, n) * scale
    c = rng.uniform(0.0, 2.5 * scale, n)
    return np.minimum(t, c), (t <= c).astype(int)


def _scipy_frozen(fit):
    """The fitted distribution as a scipy.stats object (lifelines' parameter names)."""
    th = fit.theta
    if fit.distribution == "exponential":
        return stats.expon(scale=np.exp(-th[0]))
    if fit.distribution == "weibull":
        return stats.weibull_min(c=th[1], scale=th[0])
    if fit.distribution == "log-normal":
        return stats.lognorm(s=th[1], scale=np.exp(th[0]))
    return stats.fisk(c=th[1], scale=th[0])


def _direct_log_likelihood(dist, time, event):
    event = event.astype(bool)
    return float(dist.logpdf(time[event]).sum() + dist.logsf(time[~event]).sum())


def test_exponential_rate_is_events_over_total_time(rng):
    time, event = _censored_weibull(rng)
    fit = fit_distribution(time, event, "exponential")
    rate = fit.parameters.set_index("parameter").loc["rate", "estimate"]
    assert rate == pytest.approx(event.sum() / time.sum(), rel=1e-14)
    # With delayed entry the exposure is time - entry.
    entry = time * 0.3
    fit = fit_distribution(time, event, "exponential", entry=entry)
    rate = fit.parameters.set_index("parameter").loc["rate", "estimate"]
    assert rate == pytest.approx(event.sum() / (time - entry).sum(), rel=1e-14)


def test_exponential_median_and_survival_intervals_by_hand(rng):
    time, event = _censored_weibull(rng)
    fit = fit_distribution(time, event, "exponential")
    d, rate, z = event.sum(), event.sum() / time.sum(), stats.norm.ppf(0.975)
    se_log_rate = 1 / np.sqrt(d)  # information for log rate is d
    med = fit.quantile(0.5)
    assert_allclose(med["time"], np.log(2) / rate, rtol=1e-12)
    assert_allclose(med["lower"], np.log(2) / rate * np.exp(-z * se_log_rate), rtol=1e-6)
    assert_allclose(med["upper"], np.log(2) / rate * np.exp(z * se_log_rate), rtol=1e-6)
    s = fit.survival([5.0]).iloc[0]
    assert_allclose(s.survival, np.exp(-rate * 5), rtol=1e-12)
    assert_allclose(s.lower, np.exp(-rate * 5 * np.exp(z * se_log_rate)), rtol=1e-6)


@pytest.mark.parametrize("shape, scale", [(0.8, 3.0), (1.5, 10.0), (3.0, 100.0)])
def test_weibull_uncensored_matches_scipy_weibull_min_fit(rng, shape, scale):
    data = rng.weibull(shape, 800) * scale
    c, _, s = stats.weibull_min.fit(data, floc=0)
    fit = fit_distribution(data, np.ones_like(data), "weibull")
    assert_allclose(fit.theta, [s, c], rtol=1e-4)
    # Both are maxima of the same likelihood: ours is at least as high as scipy's, up to rounding.
    direct = _direct_log_likelihood(stats.weibull_min(c=c, scale=s), data, np.ones(800))
    assert fit.log_likelihood >= direct - 1e-6


def test_lognormal_uncensored_matches_closed_form_mle(rng):
    data = rng.lognormal(1.0, 0.7, 500)
    logs = np.log(data)
    fit = fit_distribution(data, np.ones_like(data), "log-normal")
    closed = stats.lognorm(s=logs.std(ddof=0), scale=np.exp(logs.mean()))
    # lifelines' optimiser stops within ~1e-5 of the maximum (log-likelihood within 1e-6).
    assert_allclose(fit.theta, [logs.mean(), logs.std(ddof=0)], rtol=1e-4)
    assert fit.log_likelihood == pytest.approx(closed.logpdf(data).sum(), abs=1e-6)


def test_loglogistic_uncensored_matches_scipy_fisk_fit(rng):
    data = stats.fisk(c=2.5, scale=4.0).rvs(size=600, random_state=rng)
    c, _, s = stats.fisk.fit(data, floc=0)
    fit = fit_distribution(data, np.ones_like(data), "log-logistic")
    assert_allclose(fit.theta, [s, c], rtol=1e-3)


def test_log_likelihood_and_aic_ordering_match_direct_computation(rng):
    time, event = _censored_weibull(rng)
    result = compare_distributions(time, event)
    direct = {}
    for fit in result.fits:
        ll = _direct_log_likelihood(_scipy_frozen(fit), time, event)
        assert_allclose(fit.log_likelihood, ll, rtol=1e-9)
        direct[fit.distribution] = -2 * ll + 2 * len(fit.theta)
    assert list(result.aic_table["distribution"]) == sorted(direct, key=direct.get)
    assert_allclose(result.aic_table["aic"], sorted(direct.values()), rtol=1e-9)
    assert result.aic_table["delta_aic"].iloc[0] == 0
    # Weibull data: Weibull beats the exponential it nests (likelihood at least as high).
    ll = result.aic_table.set_index("distribution")["log_likelihood"]
    assert ll["weibull"] >= ll["exponential"]


@pytest.mark.parametrize("distribution", DISTRIBUTIONS)
def test_curves_and_median_match_scipy_at_fitted_parameters(rng, distribution):
    time, event = _censored_weibull(rng)
    fit = fit_distribution(time, event, distribution)
    dist = _scipy_frozen(fit)
    grid = np.array([0.0, 1.0, 5.0, 20.0, 60.0])
    curve = fit.survival(grid)
    assert_allclose(curve["survival"], dist.sf(grid), rtol=1e-9)
    assert (curve["lower"] <= curve["survival"]).all()
    assert (curve["survival"] <= curve["upper"]).all()
    assert list(curve["extrapolated"]) == list(grid > time.max())
    med = fit.quantile(0.5)
    assert_allclose(med["time"], dist.median(), rtol=1e-9)
    assert med["lower"] < med["time"] < med["upper"]


def test_weibull_interval_matches_lifelines_delta_method(rng):
    # lifelines computes a delta-method standard error of the cumulative hazard H; ours is of
    # log H, so se(log H) * H must equal lifelines' se(H) (same covariance, same gradient).
    time, event = _censored_weibull(rng)
    grid = np.array([2.0, 6.0, 12.0])
    ref = WeibullFitter().fit(time, event, timeline=grid)
    z = stats.norm.ppf(0.975)
    ci = ref.confidence_interval_cumulative_hazard_.to_numpy()
    se_h_ref = (ci.max(axis=1) - ci.min(axis=1)) / (2 * z)
    fit = fit_distribution(time, event, "weibull")
    curve = fit.survival(grid)
    h = -np.log(curve["survival"].to_numpy())
    se_log_h = (np.log(-np.log(curve["lower"])) - np.log(h)) / z
    assert_allclose(se_log_h * h, se_h_ref, rtol=1e-4)


def test_comparison_by_group_extrapolation_and_json(rng):
    time, event = _censored_weibull(rng, n=400)
    group = rng.choice(["b", "a"], len(time))
    result = compare_distributions(time, event, group=group, times=[5.0, 100.0], horizon=80.0)
    assert set(result.aic_table["group"]) == {"a", "b"}
    assert len(result.aic_table) == 8
    for g in ("a", "b"):
        mask = group == g
        alone = fit_distribution(time[mask], event[mask], "weibull")
        assert_allclose(result.fit("weibull", g).theta, alone.theta, rtol=1e-8)
    curves = result.curves
    assert curves["time"].max() == 80.0
    for g in ("a", "b"):  # extrapolation starts after each group's own last observed time
        own = curves[curves.group == g]
        last = time[group == g].max()
        assert (own["extrapolated"] == (own["time"] > last)).all()
        assert own["extrapolated"].any()
    est = result.estimates
    assert est.loc[(est.quantity == "survival") & (est.time == 100.0), "extrapolated"].all()
    json.dumps(result.to_dict(), allow_nan=False)


@pytest.mark.parametrize(
    "time, event, match",
    [
        ([0.0, 1.0, 2.0], [1, 0, 1], "times > 0"),
        ([1.0, 2.0], [0, 0], "no events"),
    ],
)
def test_bad_input_raises_clear_error(time, event, match):
    with pytest.raises(AnalysisError, match=match):
        fit_distribution(time, event, "weibull")


def test_prepared_frame_wrapper_keeps_group_order(rng):
    import pandas as pd

    from engine.parametric.fits import fit_parametric

    time, event = _censored_weibull(rng, n=300)
    frame = pd.DataFrame(
        {
            "_time": time,
            "_event": event,
            "_group": pd.Categorical(rng.choice(["low", "high"], 300), ["low", "high"]),
        }
    )
    result = fit_parametric(frame, by_group=True, distributions=("weibull",))
    assert [f.group for f in result.fits] == ["low", "high"]
    overall = fit_parametric(frame, distributions=("weibull",))
    assert overall.fits[0].group is None and overall.fits[0].n == 300


def test_parameters_are_named_in_words_with_their_parametrisation(rng):
    # Weibull S(t) = exp(-(t / scale)^shape): the fitted scale and shape reproduce the curve
    # (scipy's weibull_min with c = shape, scale = scale, as the reference).
    from engine.parametric.fits import PARAMETRISATION

    time, event = _censored_weibull(rng)
    fit = fit_distribution(time, event, "weibull")
    params = fit.parameters.set_index("parameter")["estimate"]
    assert list(params.index) == ["scale", "shape"]
    grid = np.array([1.0, 5.0, 20.0])
    expected = stats.weibull_min(c=params["shape"], scale=params["scale"]).sf(grid)
    assert_allclose(fit.survival(grid)["survival"], expected, rtol=1e-9)
    assert fit.to_dict()["parametrisation"] == PARAMETRISATION["weibull"]
    names = {
        d: list(fit_distribution(time, event, d).parameters["parameter"]) for d in DISTRIBUTIONS
    }
    assert names == {
        "exponential": ["log rate", "rate"],
        "weibull": ["scale", "shape"],
        "log-normal": ["mean of log time", "SD of log time"],
        "log-logistic": ["scale", "shape"],
    }
