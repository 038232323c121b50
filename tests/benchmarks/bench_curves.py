"""Kaplan–Meier by three groups plus the log-rank test on 1,000,000 rows: Hazel vs lifelines.

Run by hand (not collected by the default test run):

    .venv/bin/python tests/benchmarks/bench_curves.py

Targets (issue 3): time within 1.2x of lifelines' own fitters on the same arrays
(KaplanMeierFitter per group + multivariate_logrank_test); peak memory allocated during Hazel's
computation under 2x the input frame's size (tracemalloc, which sees numpy's buffers).
"""

from __future__ import annotations

import time
import tracemalloc

import numpy as np
import pandas as pd
from lifelines import KaplanMeierFitter
from lifelines.statistics import multivariate_logrank_test

from engine.survival.compare import compare_frame
from engine.survival.curves import curves_by_group

ROWS = 1_000_000
REPEATS = 2


def make_frame(rows: int = ROWS, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    group = rng.integers(0, 3, rows)
    latent = rng.exponential(10.0 / (1.0 + 0.2 * group))
    censor = rng.exponential(15.0, rows)
    return pd.DataFrame(
        {
            "_time": np.round(np.minimum(latent, censor), 2),  # realistic ties
            "_event": (latent <= censor).astype(np.int64),
            "_group": pd.Categorical.from_codes(group, ["A", "B", "C"]),
        }
    )


def hazel(frame: pd.DataFrame):
    return curves_by_group(frame), compare_frame(frame)


def lifelines_fitters(frame: pd.DataFrame):
    time_, event = frame["_time"].to_numpy(), frame["_event"].to_numpy()
    group = frame["_group"].to_numpy()
    fits = [KaplanMeierFitter().fit(time_[group == g], event[group == g]) for g in "ABC"]
    return fits, multivariate_logrank_test(time_, group, event)


def best_time(func, frame) -> tuple[float, object]:
    best, result = np.inf, None
    for _ in range(REPEATS):
        start = time.perf_counter()
        result = func(frame)
        best = min(best, time.perf_counter() - start)
    return best, result


def main() -> None:
    frame = make_frame()
    frame_bytes = frame.memory_usage(deep=True).sum()
    hazel_s, (curves, test) = best_time(hazel, frame)
    lifelines_s, (_, reference) = best_time(lifelines_fitters, frame)
    tracemalloc.start()
    hazel(frame)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"rows: {len(frame):,}; input frame: {frame_bytes / 2**20:.1f} MiB")
    print(f"Hazel KM x3 (+ all rows) + log-rank: {hazel_s:.3f} s (best of {REPEATS})")
    print(f"lifelines KM x3 + multivariate_logrank_test: {lifelines_s:.3f} s (best of {REPEATS})")
    print(f"time ratio Hazel / lifelines: {hazel_s / lifelines_s:.2f} (target <= 1.2)")
    print(f"Hazel peak allocation: {peak / 2**20:.1f} MiB = {peak / frame_bytes:.2f}x input (< 2)")
    print(f"log-rank: Hazel {test.statistic:.6f}, lifelines {reference.test_statistic:.6f}")
    points = {c.label: len(c.time) for c in curves.curves}
    print(f"curve points per label (None = all rows): {points}")


if __name__ == "__main__":
    main()
