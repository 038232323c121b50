"""Step-curve thinning: few vertices, and the drawn line moves by less than a pixel.

The deviation is measured exactly: both curves are step functions (value held from one vertex to
the next), so the largest vertical gap between them occurs at one of the original vertex times.
That vertical gap bounds how far any point of the drawn path moves.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from app.thinning import step_vertices_to_keep, thin_points, thin_step_frame


def _step_value(times: np.ndarray, values: np.ndarray, at: np.ndarray) -> np.ndarray:
    """Value of the step-after function through (times, values) at the times ``at``."""
    index = np.searchsorted(times, at, side="right") - 1
    return values[np.clip(index, 0, len(values) - 1)]


def _km_like(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    """A decreasing step curve with n vertices, from 1 towards 0, at random distinct times."""
    times = np.sort(rng.uniform(0, 100, n))
    times[0] = 0.0
    drops = rng.exponential(1.0, n)
    drops[0] = 0.0
    values = 1.0 - np.cumsum(drops) / drops.sum() * rng.uniform(0.5, 1.0)
    return times, values


@pytest.mark.parametrize("n", [10, 1_000, 200_000])
@pytest.mark.parametrize("height_px", [200, 480])
def test_thinned_curve_moves_less_than_a_pixel(rng, n, height_px):
    times, values = _km_like(rng, n)
    keep = step_vertices_to_keep([values], (0.0, 1.0), height_px)
    thinned = _step_value(times[keep], values[keep], times)
    gap_px = np.max(np.abs(thinned - values)) * height_px
    assert gap_px < 1.0
    assert keep[0] and keep[-1]


@pytest.mark.parametrize("height_px", [200, 360, 480])
def test_vertex_count_is_bounded_by_the_chart_height(rng, height_px):
    _, values = _km_like(rng, 1_000_000)
    keep = step_vertices_to_keep([values], (0.0, 1.0), height_px)
    # One vertex per half-pixel row at most, plus the two ends.
    assert keep.sum() <= 2 * height_px + 2
    assert keep.sum() < 5_000


def test_band_and_estimate_thinned_together_each_move_less_than_a_pixel(rng):
    times, values = _km_like(rng, 100_000)
    lower, upper = values**1.2, values**0.8
    keep = step_vertices_to_keep([values, lower, upper], (0.0, 1.0), 360)
    for series in (values, lower, upper):
        thinned = _step_value(times[keep], series[keep], times)
        assert np.max(np.abs(thinned - series)) * 360 < 1.0
    assert keep.sum() < 5_000


def test_small_curves_keep_every_vertex_that_is_visible():
    values = np.array([1.0, 0.9, 0.8, 0.5, 0.2])
    keep = step_vertices_to_keep([values], (0.0, 1.0), 300)
    assert keep.all()


def test_vertices_within_half_a_pixel_collapse_to_the_first():
    # At 100 px, half-pixel rows are 0.005 high: 0.602, 0.6015 and 0.601 share [0.600, 0.605).
    values = np.array([1.0, 0.602, 0.6015, 0.601, 0.3])
    keep = step_vertices_to_keep([values], (0.0, 1.0), 100)
    assert keep.tolist() == [True, True, False, False, True]


def test_missing_values_are_kept():
    values = np.array([1.0, 0.99999, np.nan, 0.99998, 0.99997])
    keep = step_vertices_to_keep([values], (0.0, 1.0), 100)
    assert keep[2] and keep[3]


def test_cumulative_hazard_scale_uses_its_own_domain(rng):
    times = np.sort(rng.uniform(0, 10, 50_000))
    hazard = np.cumsum(rng.exponential(1e-4, times.size))
    domain = (0.0, float(hazard.max()))
    keep = step_vertices_to_keep([hazard], domain, 400)
    thinned = _step_value(times[keep], hazard[keep], times)
    assert np.max(np.abs(thinned - hazard)) / domain[1] * 400 < 1.0
    assert keep.sum() <= 2 * 400 + 2


def test_thin_step_frame_thins_each_group_separately(rng):
    parts = []
    for label in ("a", "b"):
        times, values = _km_like(rng, 20_000)
        parts.append(pd.DataFrame({"group": label, "time": times, "estimate": values}))
    frame = pd.concat(parts, ignore_index=True)
    thinned = thin_step_frame(frame, ["estimate"], (0.0, 1.0), 300, group="group")
    assert set(thinned["group"]) == {"a", "b"}
    for label in ("a", "b"):
        original = frame[frame["group"] == label]
        kept = thinned[thinned["group"] == label]
        assert kept["time"].iloc[0] == original["time"].iloc[0]
        assert kept["time"].iloc[-1] == original["time"].iloc[-1]
        gap = _step_value(
            kept["time"].to_numpy(), kept["estimate"].to_numpy(), original["time"].to_numpy()
        )
        assert np.max(np.abs(gap - original["estimate"].to_numpy())) * 300 < 1.0


def test_thin_points_keeps_one_mark_per_pixel():
    frame = pd.DataFrame(
        {"group": ["a"] * 4 + ["b"], "time": [1.0, 1.001, 50.0, 50.0, 1.0], "estimate": 0.5}
    )
    kept = thin_points(frame, "time", "estimate", (0, 100), (0, 1), (100, 100), group="group")
    assert kept["time"].tolist() == [1.0, 50.0, 1.0]
