"""Landmark selection: exact counts by hand, and conditional Kaplan–Meier S(t) / S(L)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import KaplanMeierFitter
from numpy.testing import assert_allclose

from engine.errors import AnalysisError
from engine.survival.landmark import landmark


@pytest.fixture
def small():
    # Landmark 3: rows 0-1 have events before 3, row 2 an event at exactly 3 (excluded: not at
    # risk just after 3), row 3 censored at 2, row 4 censored at 3 (excluded), rows 5-8 go on.
    return pd.DataFrame(
        {
            "_time": [1.0, 2.5, 3.0, 2.0, 3.0, 4.0, 6.0, 3.5, 9.0],
            "_event": [1, 1, 1, 0, 0, 1, 0, 1, 0],
            "_group": pd.Categorical(list("aabbaabbb"), categories=["a", "b", "c"]),
            "age": np.arange(9.0),
        }
    )


def test_exact_counts_on_hand_example(small):
    result = landmark(small, 3.0)
    counts = result.counts.set_index(result.counts["group"].fillna("all"))
    assert counts.loc["all"].drop("group").tolist() == [9, 4, 3, 2, 0]
    assert counts.loc["a"].drop("group").tolist() == [4, 1, 2, 1, 0]
    assert counts.loc["b"].drop("group").tolist() == [5, 3, 1, 1, 0]
    assert counts.loc["c"].drop("group").tolist() == [0, 0, 0, 0, 0]
    assert result.n_kept == 4 and result.n_excluded == 5
    assert result.frame["_time"].tolist() == [1.0, 3.0, 0.5, 6.0]  # measured from the landmark
    assert result.frame["age"].tolist() == [5.0, 6.0, 7.0, 8.0]
    assert list(result.frame["_group"].cat.categories) == ["a", "b", "c"]
    json.dumps(result.to_dict(), allow_nan=False)


def test_original_time_scale_sets_entry(small):
    result = landmark(small, 3.0, time_from_landmark=False)
    assert result.frame["_time"].tolist() == [4.0, 6.0, 3.5, 9.0]
    assert (result.frame["_entry"] == 3.0).all()


def test_delayed_entry_after_landmark_is_excluded_and_counted():
    frame = pd.DataFrame(
        {"_time": [5.0, 6.0, 7.0, 2.0], "_event": [1, 0, 1, 1], "_entry": [0.0, 4.0, 1.0, 0.0]}
    )
    result = landmark(frame, 3.0)
    assert result.counts.iloc[-1].drop("group").tolist() == [4, 2, 1, 0, 1]
    assert "_entry" not in result.frame.columns
    assert result.frame["_time"].tolist() == [2.0, 4.0]


@settings(max_examples=80, deadline=None)
@given(
    data=st.lists(st.tuples(st.integers(1, 15), st.booleans()), min_size=2, max_size=50),
    at=st.sampled_from([2.0, 4.5, 6.0, 7.5]),
)
def test_km_after_landmark_is_conditional_km(data, at):
    # Exact property: the product-limit estimate over subjects with time > L, on time since L,
    # equals S(L + s) / S(L) from the whole cohort (ties at L included: both sides count an
    # event at L as before the landmark). Reference KM: lifelines.
    time = np.array([t for t, _ in data], dtype=float)
    event = np.array([e for _, e in data], dtype=int)
    frame = pd.DataFrame({"_time": time, "_event": event})
    if (time > at).sum() == 0 or at >= time.max():
        return
    result = landmark(frame, at)
    kept = result.frame
    full = KaplanMeierFitter().fit(time, event)
    s_at = float(full.survival_function_at_times([at]).iloc[0])
    if s_at == 0:
        return
    grid = np.arange(0.0, 16.0, 0.25)
    after = KaplanMeierFitter().fit(kept["_time"], kept["_event"])
    conditional = full.survival_function_at_times(at + grid).to_numpy() / s_at
    assert_allclose(after.survival_function_at_times(grid).to_numpy(), conditional, atol=1e-12)
    # Same curve on the original scale with entry at L (left truncation).
    original = landmark(frame, at, time_from_landmark=False).frame
    truncated = KaplanMeierFitter().fit(
        original["_time"], original["_event"], entry=original["_entry"]
    )
    assert_allclose(
        truncated.survival_function_at_times(at + grid[1:]).to_numpy(), conditional[1:], atol=1e-12
    )


@pytest.mark.parametrize("at", [-1.0, np.nan, 9.0, 20.0])
def test_bad_landmark_raises_clear_error(small, at):
    with pytest.raises(AnalysisError, match="landmark"):
        landmark(small, at)


def test_competing_cause_before_landmark_counts_as_event():
    frame = pd.DataFrame(
        {
            "_time": [1.0, 2.0, 2.5, 5.0],
            "_event": [1, 0, 0, 1],  # event of interest only
            "_cause": ["relapse", "death", None, "relapse"],
        }
    )
    counts = landmark(frame, 3.0).counts.iloc[-1]
    assert (counts["n_events_before"], counts["n_censored_before"]) == (2, 1)
