"""Speed of competing risks, parametric and AFT fits, landmark selection on 1,000,000 rows.

    .venv/bin/python tests/benchmarks/bench_extra.py [n_rows] [--skip-slow]

``--skip-slow`` leaves out lifelines' Aalen–Johansen variance (a Python loop over every distinct
time: about four minutes on 1,000,000 rows).

Run by hand (not collected by pytest). Each of our calls is timed beside the library call it
wraps or replaces, on the same data; the target is at most 1.5x the library's time.
"""

from __future__ import annotations

import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from engine.competing.incidence import aalen_johansen
from engine.parametric.aft import fit_aft
from engine.parametric.fits import fit_distribution
from engine.survival.landmark import landmark
from engine.survival.sample_size import events_needed, power_curve


def simulated(n: int, seed: int = 20261202) -> pd.DataFrame:
    """Two competing causes, continuous times (no ties, so lifelines does not jitter)."""
    rng = np.random.default_rng(seed)
    age = rng.normal(60, 10, n)
    arm = rng.integers(0, 2, n)
    scale = np.exp(2.0 + 0.02 * (age - 60) + 0.3 * arm)
    t1 = rng.weibull(1.3, n) * scale
    t2 = rng.exponential(15.0, n)
    cens = rng.uniform(0.5, 25.0, n)
    time_ = np.minimum.reduce([t1, t2, cens])
    code = np.select([time_ == t1, time_ == t2], [1, 2], 0)
    return pd.DataFrame(
        {
            "_time": time_,
            "_event": (code > 0).astype(int),
            "code": code,
            "_cause": np.where(code == 1, "relapse", np.where(code == 2, "death", None)),
            "age": age,
            "arm": pd.Categorical(np.where(arm == 1, "new", "control"), ["control", "new"]),
            "arm_new": arm.astype(float),
        }
    )


def timed(label, func):
    start = time.perf_counter()
    value = func()
    seconds = time.perf_counter() - start
    print(f"{label:<62s} {seconds:8.2f} s", flush=True)
    return value, seconds


def ratio(ours: float, theirs: float) -> None:
    print(f"{'  ratio ours / library':<62s} {ours / theirs:8.2f} x", flush=True)


def main(n: int, skip_slow: bool = False) -> None:
    from lifelines import (
        AalenJohansenFitter,
        ExponentialFitter,
        LogLogisticFitter,
        LogNormalFitter,
        WeibullAFTFitter,
        WeibullFitter,
    )

    warnings.simplefilter("ignore")
    frame = simulated(n)
    t, e = frame["_time"].to_numpy(), frame["_event"].to_numpy()
    print(f"{n} rows, {int(e.sum())} events, {frame['_time'].nunique()} distinct times")

    print("\n-- competing risks")
    _, lib_novar = timed(
        "lifelines AalenJohansenFitter, relapse only, no variance",
        lambda: AalenJohansenFitter(calculate_variance=False).fit(t, frame["code"], 1),
    )
    _, ours = timed(
        "ours: aalen_johansen, both causes, with variance + 1-KM",
        lambda: aalen_johansen(t, frame["_cause"]),
    )
    ratio(ours, lib_novar)
    if not skip_slow:
        _, lib_var = timed(
            "lifelines AalenJohansenFitter, relapse only, with variance",
            lambda: AalenJohansenFitter().fit(t, frame["code"], 1),
        )
        ratio(ours, lib_var)

    print("\n-- parametric fits, overall")
    fitters = {
        "exponential": ExponentialFitter,
        "weibull": WeibullFitter,
        "lognormal": LogNormalFitter,
        "loglogistic": LogLogisticFitter,
    }
    for dist, fitter in fitters.items():
        _, lib = timed(f"lifelines {fitter.__name__}.fit", lambda f=fitter: f().fit(t, e))
        _, ours = timed(f"ours: fit_distribution {dist}", lambda d=dist: fit_distribution(t, e, d))
        ratio(ours, lib)

    print("\n-- AFT, covariates age + arm")
    data = frame[["_time", "_event", "age", "arm_new"]]
    _, lib = timed(
        "lifelines WeibullAFTFitter.fit", lambda: WeibullAFTFitter().fit(data, "_time", "_event")
    )
    _, ours = timed("ours: fit_aft weibull", lambda: fit_aft(frame, ["age", "arm"], "weibull"))
    ratio(ours, lib)
    timed(
        "ours: fit_aft exponential (own Newton-Raphson)",
        lambda: fit_aft(frame, ["age", "arm"], "exponential"),
    )

    print("\n-- landmark and sample size")
    _, lib = timed(
        "pandas: frame[frame._time > 5].copy()", lambda: frame[frame["_time"] > 5.0].copy()
    )
    _, ours = timed("ours: landmark at 5 (filter + counts)", lambda: landmark(frame, 5.0))
    ratio(ours, lib)
    timed(
        "ours: events_needed + power_curve (both methods)",
        lambda: (events_needed(0.7), power_curve(247)),
    )


if __name__ == "__main__":
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    main(int(args[0]) if args else 1_000_000, skip_slow="--skip-slow" in sys.argv)
