"""Speed of episodes with robust variance, splines and subgroups on 100,000 rows (run by hand).

    .venv/bin/python tests/benchmarks/bench_episodes.py [n_rows] [--skip-slow]

Each section is timed against its reference library call on the same data:
- episodes: ``fit_cox`` with entry times and the robust variance clustered by subject, against
  lifelines ``CoxTimeVaryingFitter`` (coefficients and model-based errors only) and statsmodels
  ``PHReg(entry=...).fit(groups=...)`` (robust errors; slow: skipped with --skip-slow);
- splines: ``fit_splines`` (the spline model, the non-linearity and association tests and the
  curve) against statsmodels ``PHReg`` on patsy's ``cr`` basis plus the linear model (the two
  fits the non-linearity test needs);
- subgroups: ``fit_subgroups`` (the overall row, every subgroup row and each interaction test)
  against the same fits by statsmodels ``PHReg``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from engine.cox.fit import fit_cox
from engine.cox.splines import fit_splines
from engine.cox.subgroups import fit_subgroups


def episodes(n_rows: int, seed: int = 20261202) -> pd.DataFrame:
    """About n_rows episodes: subjects with 1-4 consecutive visits, day-rounded times."""
    rng = np.random.default_rng(seed)
    subjects = n_rows // 2
    visits = rng.integers(1, 5, subjects)
    visits = visits[np.cumsum(visits) <= n_rows]
    subject = np.repeat(np.arange(len(visits)), visits)
    n = len(subject)
    lab = rng.normal(size=n)
    treated = np.repeat(rng.integers(0, 2, len(visits)), visits).astype(float)
    length = np.ceil(rng.exponential(200 * np.exp(-0.3 * lab - 0.2 * treated)))
    # Consecutive visits of one subject: each starts where the previous ended.
    cumulative = np.cumsum(length)
    first = np.r_[0, np.cumsum(visits)[:-1]]
    offset = np.repeat(cumulative[first] - length[first], visits)
    end = cumulative - offset
    start = end - length
    last = np.r_[subject[1:] != subject[:-1], True]
    event = np.where(last, rng.random(n) < 0.6, rng.random(n) < 0.2).astype(int)
    return pd.DataFrame(
        {"_id": subject, "_entry": start, "_time": end, "_event": event, "lab": lab,
         "treated": treated, "age": np.repeat(rng.normal(60, 10, len(visits)), visits),
         "site": np.repeat(rng.choice(["north", "south", "east"], len(visits)), visits)}
    )  # fmt: skip


def timed(label, func):
    start, start_cpu = time.perf_counter(), time.process_time()
    value = func()
    wall, cpu = time.perf_counter() - start, time.process_time() - start_cpu
    print(f"{label:<62s} {wall:8.2f} s wall {cpu:8.2f} s cpu", flush=True)
    return value, cpu


def bench_episodes(frame: pd.DataFrame, skip_slow: bool) -> None:
    from lifelines import CoxTimeVaryingFitter

    covariates = ["lab", "treated"]
    ours, ours_cpu = timed(
        "ours: fit_cox, entry + robust by subject (no drop-one)",
        lambda: fit_cox(frame, covariates, entry="_entry", clusters="_id", without_each=False),
    )
    columns = ["_id", "_entry", "_time", "_event", *covariates]
    ctv, ctv_cpu = timed(
        "lifelines: CoxTimeVaryingFitter.fit",
        lambda: CoxTimeVaryingFitter().fit(
            frame[columns], id_col="_id", start_col="_entry", stop_col="_time", event_col="_event"
        ),
    )
    difference = np.abs(ours.model.beta - ctv.params_.to_numpy()).max()
    print(
        f"  ratio ours / lifelines {ours_cpu / ctv_cpu:.2f}; "
        f"largest coef difference {difference:.1e}"
    )
    if skip_slow:
        return
    from statsmodels.duration.hazard_regression import PHReg

    shifted = frame["_entry"].where(frame["_entry"] == 0, frame["_entry"] + 1e-6)  # (entry, t]
    _, sm_cpu = timed(
        "statsmodels: PHReg(entry).fit(groups) (robust)",
        lambda: PHReg(
            frame["_time"], frame[covariates], status=frame["_event"], entry=shifted,
            ties="efron",
        ).fit(groups=frame["_id"].to_numpy()),
    )  # fmt: skip
    print(f"  ratio ours / statsmodels {ours_cpu / sm_cpu:.2f}")


def bench_splines(frame: pd.DataFrame) -> None:
    import patsy
    from statsmodels.duration.hazard_regression import PHReg

    # One row per episode, as if each were a subject followed from 0: all the rows, no entry.
    one = frame.assign(_time=frame["_time"] - frame["_entry"]).drop(columns=["_entry", "_id"])
    model, ours_cpu = timed(
        "ours: fit_splines (age, 4 knots; tests and curve)",
        lambda: fit_splines(one, ["age", "treated"], [{"variable": "age", "knots": 4}]),
    )
    knots = model.effects[0].knots

    def reference():
        basis = patsy.dmatrix(
            f"cr(age, knots={list(knots[1:-1])}, lower_bound={knots[0]}, "
            f"upper_bound={knots[-1]}, constraints='center') - 1",
            one,
        )
        design = np.column_stack([np.asarray(basis), one["treated"]])
        full = PHReg(one["_time"], design, status=one["_event"], ties="efron").fit()
        linear = PHReg(
            one["_time"], one[["age", "treated"]], status=one["_event"], ties="efron"
        ).fit()
        return full, linear

    (full, linear), sm_cpu = timed("statsmodels: PHReg on cr basis + linear model", reference)
    difference = abs(model.effects[0].nonlinearity.statistic - 2 * (full.llf - linear.llf))
    print(
        f"  rows {len(one)}; ratio ours / statsmodels {ours_cpu / sm_cpu:.2f}; "
        f"LR difference {difference:.1e}"
    )
    return one


def bench_subgroups(one: pd.DataFrame) -> None:
    from statsmodels.duration.hazard_regression import PHReg

    one = one.assign(_group=pd.Categorical(np.where(one["treated"] > 0, "new", "standard")))
    one["_group"] = one["_group"].cat.reorder_categories(["standard", "new"])
    _, ours_cpu = timed(
        "ours: fit_subgroups (site, age in 2 groups)",
        lambda: fit_subgroups(one, {"site": one["site"], "age": one["age"]}),
    )

    def reference():
        def fit(rows, columns):
            return PHReg(rows["_time"], rows[columns], status=rows["_event"], ties="efron").fit()

        frame = one.assign(active=one["treated"])
        fit(frame, ["active"])
        age = (frame["age"] > frame["age"].median()).map({True: "high", False: "low"})
        for values in (frame["site"], age):
            for level in values.unique():
                fit(frame[values == level], ["active"])
            dummies = pd.get_dummies(values, drop_first=True, dtype=float)
            products = dummies.mul(frame["active"], axis=0).add_prefix("x_")
            both = pd.concat([frame[["_time", "_event", "active"]], dummies, products], axis=1)
            fit(both, ["active", *dummies.columns])
            fit(both, ["active", *dummies.columns, *products.columns])

    _, sm_cpu = timed("statsmodels: the same fits (PHReg)", reference)
    print(f"  ratio ours / statsmodels {ours_cpu / sm_cpu:.2f}")


def main() -> None:
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    n = int(args[0]) if args else 100_000
    frame = episodes(n)
    print(
        f"{len(frame)} episodes of {frame['_id'].nunique()} subjects, "
        f"{int(frame['_event'].sum())} events, {frame['_time'].nunique()} distinct times"
    )
    bench_episodes(frame, "--skip-slow" in sys.argv)
    one = bench_splines(frame)
    bench_subgroups(one)


if __name__ == "__main__":
    main()
