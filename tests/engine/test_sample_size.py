"""Sample size and power: the published formulas recomputed by hand, round trips, monotonicity."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.stats import norm

from engine.errors import AnalysisError
from engine.survival.sample_size import events_needed, power_curve, power_for_events


def test_schoenfeld_by_hand_hr_07():
    # Schoenfeld (1983): D = (z_{1-a/2} + z_{1-b})^2 / (p (1 - p) log(HR)^2), p = 1/2 for 1:1.
    # About 247 events for HR 0.7, two-sided alpha 0.05, power 0.8 (from memory; recomputed here).
    by_hand = (norm.ppf(0.975) + norm.ppf(0.8)) ** 2 / (0.5 * 0.5 * math.log(0.7) ** 2)
    result = events_needed(0.7, power=0.8, alpha=0.05, allocation_ratio=1.0)
    assert_allclose(result.events_exact, by_hand, rtol=1e-12)
    assert result.events == math.ceil(by_hand) == 247


def test_freedman_by_hand_hr_07():
    # Freedman (1982): D = (z_{1-a/2} + z_{1-b})^2 (1 + HR)^2 / (1 - HR)^2 for 1:1 allocation.
    by_hand = (norm.ppf(0.975) + norm.ppf(0.8)) ** 2 * (1 + 0.7) ** 2 / (1 - 0.7) ** 2
    result = events_needed(0.7, method="freedman")
    assert_allclose(result.events_exact, by_hand, rtol=1e-12)
    assert result.events == math.ceil(by_hand)


def test_unequal_allocation_and_subjects_by_hand():
    # 2:1 allocation, one-sided alpha 0.025, power 0.9, 60% expected to have the event.
    k, hr, prob = 2.0, 0.75, 0.6
    z = norm.ppf(1 - 0.025) + norm.ppf(0.9)
    schoenfeld = z**2 * (1 + k) ** 2 / (k * math.log(hr) ** 2)
    freedman = z**2 * (1 + k * hr) ** 2 / (k * (1 - hr) ** 2)
    for method, by_hand in (("schoenfeld", schoenfeld), ("freedman", freedman)):
        r = events_needed(
            hr,
            power=0.9,
            alpha=0.025,
            sides=1,
            allocation_ratio=k,
            event_probability=prob,
            method=method,
        )
        assert_allclose(r.events_exact, by_hand, rtol=1e-12)
        assert r.subjects_control == math.ceil(by_hand / prob / 3)
        assert r.subjects_experimental == math.ceil(by_hand / prob * 2 / 3)
        assert r.subjects == r.subjects_control + r.subjects_experimental
        assert r.subjects * prob >= r.events_exact


@pytest.mark.parametrize("method", ["schoenfeld", "freedman"])
def test_power_for_events_by_hand(method):
    d, hr = 200.0, 0.7
    info = math.log(hr) ** 2 / 4 if method == "schoenfeld" else (1 - hr) ** 2 / (1 + hr) ** 2
    by_hand = norm.cdf(math.sqrt(d * info) - norm.ppf(0.975))
    assert_allclose(power_for_events(d, hr, method=method), by_hand, rtol=1e-12)


@settings(max_examples=200, deadline=None)
@given(
    hr=st.floats(0.2, 3.0).filter(lambda h: abs(h - 1) > 0.02),
    power=st.floats(0.5, 0.99),
    alpha=st.floats(0.001, 0.2),
    k=st.floats(0.25, 4.0),
    method=st.sampled_from(["schoenfeld", "freedman"]),
)
def test_round_trip_power_of_events_needed_reaches_target(hr, power, alpha, k, method):
    r = events_needed(hr, power=power, alpha=alpha, allocation_ratio=k, method=method)
    assert_allclose(
        power_for_events(r.events_exact, hr, alpha=alpha, allocation_ratio=k, method=method),
        power,
        rtol=1e-9,
    )
    achieved = power_for_events(r.events, hr, alpha=alpha, allocation_ratio=k, method=method)
    assert achieved >= power - 1e-12


@settings(max_examples=100, deadline=None)
@given(
    hr=st.floats(0.3, 0.95),
    power=st.floats(0.5, 0.95),
    method=st.sampled_from(["schoenfeld", "freedman"]),
)
def test_monotonicity(hr, power, method):
    base = events_needed(hr, power=power, method=method).events_exact
    # A larger effect (HR further from 1) needs fewer events.
    assert events_needed(hr * 0.95, power=power, method=method).events_exact < base
    # More power needs more events; a stricter alpha needs more events.
    assert events_needed(hr, power=power + 0.04, method=method).events_exact > base
    assert events_needed(hr, power=power, alpha=0.01, method=method).events_exact > base
    # A lower event probability needs more subjects for the same events.
    assert (
        events_needed(hr, power=power, event_probability=0.5, method=method).subjects
        >= events_needed(hr, power=power, event_probability=1.0, method=method).subjects
    )
    # Power grows with the number of events.
    assert power_for_events(100, hr, method=method) < power_for_events(101, hr, method=method)


def test_schoenfeld_symmetric_in_hr_and_its_inverse():
    # log(1/HR)^2 == log(HR)^2: an exact property of Schoenfeld's formula under 1:1.
    assert_allclose(events_needed(0.6).events_exact, events_needed(1 / 0.6).events_exact)


def test_power_curve_frame():
    curve = power_curve(247, [0.5, 0.7, 0.9, 1.2])
    frame = curve.to_frame()
    assert list(frame.columns) == ["method", "hazard_ratio", "power"]
    assert len(frame) == 8
    sch = frame[frame.method == "schoenfeld"].set_index("hazard_ratio")["power"]
    assert sch[0.7] > 0.8  # 247 >= 246.8 events needed for 80% power
    assert sch[0.5] > sch[0.7] > sch[0.9]
    d = curve.to_dict()
    assert isinstance(d["curve"][0]["power"], float)


@pytest.mark.parametrize(
    "kwargs",
    [
        {"hazard_ratio": 1.0},
        {"hazard_ratio": -0.5},
        {"hazard_ratio": 0.7, "alpha": 1.2},
        {"hazard_ratio": 0.7, "power": 1.0},
        {"hazard_ratio": 0.7, "allocation_ratio": 0},
        {"hazard_ratio": 0.7, "event_probability": 0},
        {"hazard_ratio": 0.7, "sides": 3},
        {"hazard_ratio": 0.7, "method": "guess"},
    ],
)
def test_bad_design_raises_clear_error(kwargs):
    with pytest.raises(AnalysisError):
        events_needed(**kwargs)


def test_result_is_json_ready():
    d = events_needed(0.7).to_dict()
    assert isinstance(d["events_exact"], float) and isinstance(d["events"], int)
    assert np.isfinite(d["events_exact"])


@pytest.mark.parametrize(
    "design",
    [
        {"alpha": 1e-300},  # 1 - alpha / 2 is 1.0 in floating point: isf, not ppf
        {"allocation_ratio": 1e308},
        {"allocation_ratio": 1e-308},
        {"event_probability": 1e-308},
        {"hazard_ratio": 1e308},
        {"hazard_ratio": 1e-308},
        {"hazard_ratio": 1 + 1e-15},
    ],
)
@pytest.mark.parametrize("method", ["schoenfeld", "freedman"])
def test_extreme_designs_give_counts_or_a_clear_error_never_an_overflow(design, method):
    """Issue 10 item 4; where a count comes back, power for it is back at the target (exact
    inverse, the module's stated property)."""
    hazard_ratio = design.pop("hazard_ratio", 0.7)
    try:
        result = events_needed(hazard_ratio, method=method, **design)
    except AnalysisError as error:
        assert "subjects" in str(error)
        return
    assert 0 < result.events <= 1e12 and result.subjects >= result.events
    design.pop("event_probability", None)
    back = power_for_events(result.events_exact, hazard_ratio, method=method, **design)
    assert back == pytest.approx(0.8, abs=1e-6)
