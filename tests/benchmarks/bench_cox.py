"""Speed of the Cox engine on 1,000,000 rows with ten covariates (run by hand, not collected).

    .venv/bin/python tests/benchmarks/bench_cox.py [n_rows]

Compares our fit with lifelines' CoxPHFitter on the same design matrix (Efron ties), times the
proportional-hazards test against the fit, and times Harrell's C. lifelines' own Schoenfeld
residuals and concordance are not timed here (quadratic / slow on this size; see the issue).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from engine.cox.concordance import harrell_c
from engine.cox.diagnostics import proportional_hazards_test
from engine.cox.fit import fit_cox


def simulated(n: int, seed: int = 20261202) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 10))
    x[:, 7:] = (x[:, 7:] > 0.3).astype(float)
    beta = np.array([0.3, -0.2, 0.1, 0.0, 0.25, -0.15, 0.05, 0.4, -0.3, 0.2])
    event_time = rng.exponential(1.0 / np.exp(x @ beta))
    censor = rng.uniform(0, 3, n)
    frame = pd.DataFrame(x, columns=[f"x{j}" for j in range(10)])
    # Rounded to a day in a 365-day year: realistic ties.
    frame["_time"] = np.ceil(np.minimum(event_time, censor) * 365) / 365
    frame["_event"] = (event_time <= censor).astype(int)
    return frame


def timed(label, func):
    """Wall and CPU seconds (CPU time is steadier on a shared machine); returns CPU time."""
    start, start_cpu = time.perf_counter(), time.process_time()
    value = func()
    seconds, cpu = time.perf_counter() - start, time.process_time() - start_cpu
    print(f"{label:<55s} {seconds:8.2f} s wall {cpu:8.2f} s cpu", flush=True)
    return value, cpu


def main(n: int) -> None:
    from lifelines import CoxPHFitter

    frame = simulated(n)
    covariates = [f"x{j}" for j in range(10)]
    print(f"{n} rows, {int(frame['_event'].sum())} events, {frame['_time'].nunique()} times")
    result, ours = timed(
        "ours: fit_cox (Efron, with concordance, no drop-one)",
        lambda: fit_cox(frame, covariates, without_each=False),
    )
    print(f"  iterations: {result.iterations}; concordance {result.concordance.concordance:.4f}")
    _, c_time = timed(
        "ours: Harrell's C alone",
        lambda: harrell_c(
            frame["_time"], frame["_event"], frame[covariates].to_numpy() @ np.ones(10)
        ),
    )
    print(f"  fit without concordance ~ {ours - c_time:.2f} s")
    rng = np.random.default_rng(7)
    timed(
        "ours: Harrell's C, 1,000,000 distinct times",
        lambda: harrell_c(rng.exponential(size=n), rng.random(n) < 0.7, rng.normal(size=n)),
    )
    _, ph_time = timed(
        "ours: PH test (km) incl. Schoenfeld residuals", lambda: proportional_hazards_test(result)
    )
    print(f"  PH test / fit time: {ph_time / ours:.2f}")
    lifelines_frame = frame[[*covariates, "_time", "_event"]]
    fitter, theirs = timed(
        "lifelines: CoxPHFitter.fit (Efron)",
        lambda: CoxPHFitter().fit(lifelines_frame, "_time", "_event"),
    )
    ratio, ratio_no_c = ours / theirs, (ours - c_time) / theirs
    print(f"  ours / lifelines: {ratio:.2f} (without our concordance: {ratio_no_c:.2f})")
    diff = np.abs(fitter.params_.to_numpy() - result.to_frame()["coef"].to_numpy()).max()
    print(f"  largest coefficient difference from lifelines: {diff:.2e}")
    _, _full = timed("ours: fit_cox with drop-one refits", lambda: fit_cox(frame, covariates))


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000)
