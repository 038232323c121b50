"""Speed of Gray's test, the Fine–Gray model and the prediction-performance measures.

    .venv/bin/python tests/benchmarks/bench_finegray.py [n_rows] [--skip-slow]

Run by hand (not collected by pytest); default 100,000 rows. Each of our calls is timed beside
the library call that does the same job on the same data (target: at most 1.5x its time; the
bootstrap per replicate). ``--skip-slow`` leaves out scikit-survival's concordance_index_ipcw,
a Python loop over every event (minutes on 100,000 rows).

References:
- Gray's test: lifelines' multivariate_logrank_test on the same groups (no library in the
  environment computes Gray's test; the log-rank test is the same kind of k-sample test).
- Fine–Gray: lifelines CoxPHFitter on the same rows and covariates (the weighted fit on the
  expanded data would have tens of millions of rows here), and, on 3,000 rows, lifelines'
  weighted delayed-entry fit of the expanded data itself.
- Performance: scikit-survival's concordance_index_ipcw, cumulative_dynamic_auc, brier_score
  and integrated_brier_score (model and Kaplan–Meier reference), on the same predictions.
- Bootstrap, per replicate: lifelines CoxPHFitter on the resample, lifelines'
  concordance_index on the resample and on the original rows, and the slope fit.
"""

from __future__ import annotations

import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "engine"))

from engine.competing.fine_gray import fit_fine_gray
from engine.competing.gray_test import gray_test
from engine.cox.fit import fit_cox
from engine.prediction.optimism import bootstrap_optimism
from engine.prediction.performance import cox_predictions, prediction_performance


def simulated(n: int, seed: int = 20261202) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    age = rng.normal(60, 10, n)
    arm = rng.integers(0, 2, n)
    site = rng.integers(0, 3, n)
    t1 = rng.weibull(1.3, n) * np.exp(2.0 + 0.02 * (age - 60) + 0.3 * arm)
    t2 = rng.exponential(15.0, n)
    cens = rng.uniform(0.5, 25.0, n)
    time_ = np.minimum.reduce([t1, t2, cens])
    code = np.select([time_ == t1, time_ == t2], [1, 2], 0)
    return pd.DataFrame(
        {
            "_time": time_,
            "_event": (code == 1).astype(int),
            "code": code,
            "_cause": np.where(code == 1, "relapse", np.where(code == 2, "death", None)),
            "_group": pd.Categorical(np.array(["north", "south", "east"])[site]),
            "age": age,
            "arm_new": arm.astype(float),
        }
    )


def timed(label, func, repeat=1):
    best = np.inf
    for _ in range(repeat):
        start = time.perf_counter()
        value = func()
        best = min(best, time.perf_counter() - start)
    print(f"{label:<66s} {best:8.3f} s", flush=True)
    return value, best


def ratio(label, ours, reference):
    print(f"{'  ratio ' + label:<66s} {ours / reference:8.2f}", flush=True)


def main() -> None:
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    n = int(args[0]) if args else 100_000
    skip_slow = "--skip-slow" in sys.argv
    frame = simulated(n)
    print(f"{n:,} rows, {int((frame.code == 1).sum()):,} relapses, "
          f"{int((frame.code == 2).sum()):,} deaths")  # fmt: skip

    from lifelines import CoxPHFitter
    from lifelines.statistics import multivariate_logrank_test
    from lifelines.utils import concordance_index

    # --- Gray's test ----------------------------------------------------------------------
    _, ours = timed(
        "Gray's test, relapse, 3 groups",
        lambda: gray_test(frame._time, frame._cause, frame._group, of="relapse"),
        repeat=3,
    )
    _, ref = timed(
        "lifelines multivariate_logrank_test, 3 groups",
        lambda: multivariate_logrank_test(frame._time, frame._group, frame.code == 1),
        repeat=3,
    )
    ratio("Gray's test / log-rank", ours, ref)

    # --- Fine–Gray ------------------------------------------------------------------------
    _, ours = timed(
        "fit_fine_gray (age, arm)",
        lambda: fit_fine_gray(frame, ["age", "arm_new"], "relapse"),
        repeat=3,
    )
    data = frame[["_time", "_event", "age", "arm_new"]]
    _, ref = timed(
        "lifelines CoxPHFitter (age, arm), same rows",
        lambda: CoxPHFitter().fit(data, "_time", "_event"),
        repeat=3,
    )
    ratio("Fine–Gray / lifelines Cox", ours, ref)
    small = simulated(3_000, seed=7)
    small["_time"] = np.ceil(small["_time"] * 4) / 4
    from test_fine_gray import geskus_expanded

    expanded = geskus_expanded(
        small._time.to_numpy(), small.code.to_numpy(), small[["age", "arm_new"]].to_numpy()
    ).drop(columns="id")
    print(f"  expanded data of 3,000 rows: {len(expanded):,} rows")
    _, ours_small = timed(
        "fit_fine_gray, 3,000 rows", lambda: fit_fine_gray(small, ["age", "arm_new"], "relapse")
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, ref_small = timed(
            "lifelines weighted delayed-entry fit of the expanded data",
            lambda: CoxPHFitter().fit(
                expanded, "stop", "event", weights_col="weight", entry_col="start"
            ),
        )
    ratio("Fine–Gray / expanded-data fit", ours_small, ref_small)

    # --- performance ----------------------------------------------------------------------
    from sksurv.metrics import (
        brier_score,
        concordance_index_ipcw,
        cumulative_dynamic_auc,
        integrated_brier_score,
    )
    from sksurv.util import Surv

    model = fit_cox(frame, ["age", "arm_new"], without_each=False)
    times = [2.0, 5.0, 10.0]
    _, ours = timed(
        "prediction_performance (no bootstrap)",
        lambda: prediction_performance(model, times),
        repeat=2,
    )
    pred = cox_predictions(model)
    y = Surv.from_arrays(pred.event.astype(bool), pred.time)
    grid = np.linspace(pred.time.min(), max(times), 100)

    def reference_measures():
        survival = np.column_stack([pred.survival(t) for t in times])
        cumulative_dynamic_auc(y, y, pred.linear_predictor, times)
        brier_score(y, y, survival, times)
        on_grid = np.column_stack([pred.survival(t) for t in grid])
        integrated_brier_score(y, y, on_grid, grid)
        km = np.tile(np.linspace(1, 0.5, len(grid)), (len(y), 1))  # any KM-shaped matrix
        integrated_brier_score(y, y, km, grid)

    _, ref = timed("scikit-survival AUC, Brier, 2 x integrated Brier", reference_measures)
    if not skip_slow:
        _, ref_c = timed(
            "scikit-survival concordance_index_ipcw",
            lambda: concordance_index_ipcw(y, y, pred.linear_predictor),
        )
        ref += ref_c
        ratio("performance / scikit-survival", ours, ref)
    else:
        print("  (concordance_index_ipcw skipped: ratio not computed)")

    # --- bootstrap, per replicate ---------------------------------------------------------
    reps = 5
    _, ours = timed(
        f"bootstrap_optimism, {reps} replicates", lambda: bootstrap_optimism(model, replicates=reps)
    )
    rng = np.random.default_rng(1)

    def reference_replicates():
        for _ in range(reps):
            rows = rng.integers(0, n, size=n)
            sample = data.iloc[rows].reset_index(drop=True)
            refit = CoxPHFitter().fit(sample, "_time", "_event")
            own = refit.predict_log_partial_hazard(sample)
            concordance_index(sample._time, -own, sample._event)
            test = refit.predict_log_partial_hazard(data)
            concordance_index(data._time, -test, data._event)
            CoxPHFitter().fit(data[["_time", "_event"]].assign(score=test), "_time", "_event")

    _, ref = timed(
        f"lifelines refit + 2 x concordance_index + slope, {reps} times", reference_replicates
    )
    ratio("bootstrap per replicate", ours, ref)


if __name__ == "__main__":
    main()
