"""A 1,000,000-row CSV end to end: Hazel's ``analyze`` against the same work scripted directly
on pandas + lifelines (run by hand, not collected):

    .venv/bin/python tests/benchmarks/bench_end_to_end.py [--rows N] [--repeats R]

The work: read the file, Kaplan–Meier by three sites, the log-rank test, a Cox model with five
covariates (one of them categorical). Hazel also runs its data checks and warnings, the
numbers at risk, the drop-one likelihood-ratio tests, the proportional-hazards check and
Harrell's C, and writes its JSON. Each side runs in a fresh interpreter (imports included),
alternately, and the best run of each is compared.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]

SCRIPTED = """
import sys
import pandas as pd
from lifelines import CoxPHFitter, KaplanMeierFitter
from lifelines.statistics import multivariate_logrank_test

frame = pd.read_csv(sys.argv[1])
for site, part in frame.groupby("site"):
    KaplanMeierFitter().fit(part["days"], part["status"], label=site)
test = multivariate_logrank_test(frame["days"], frame["site"], frame["status"])
design = pd.get_dummies(
    frame[["days", "status", "age", "sex", "bmi", "smoker", "stage"]],
    columns=["sex"], drop_first=True, dtype=float,
).dropna()
model = CoxPHFitter().fit(design, "days", "status")
print(test.test_statistic, *model.params_.round(6))
"""


def write_csv(path: Path, rows: int, seed: int = 20261202) -> None:
    """An invented cohort: days to an event, three sites, five covariates with a few gaps."""
    rng = np.random.default_rng(seed)
    site = rng.choice(["Northgate", "Riverside", "Hillcrest"], rows, p=[0.5, 0.3, 0.2])
    age = np.round(rng.normal(62, 11, rows), 1)
    sex = rng.choice(["female", "male"], rows)
    bmi = np.round(rng.normal(27, 4, rows), 1)
    smoker = (rng.random(rows) < 0.25).astype(int)
    stage = rng.integers(1, 5, rows)
    risk = 0.03 * (age - 62) + 0.2 * (sex == "male") + 0.02 * (bmi - 27) + 0.3 * smoker
    risk += 0.25 * (stage - 1) + np.where(site == "Riverside", 0.15, 0.0)
    event_days = rng.exponential(1500 / np.exp(risk))
    censor_days = rng.uniform(100, 3000, rows)
    frame = pd.DataFrame(
        {
            "id": np.arange(1, rows + 1),
            "days": np.ceil(np.minimum(event_days, censor_days)).astype(int),
            "status": (event_days <= censor_days).astype(int),
            "site": site,
            "age": age,
            "sex": sex,
            "bmi": bmi,
            "smoker": smoker,
            "stage": stage,
        }
    )
    frame.loc[rng.random(rows) < 0.01, "bmi"] = np.nan
    frame.to_csv(path, index=False)


def run(command: list[str]) -> float:
    start = time.perf_counter()
    done = subprocess.run(command, cwd=ROOT, capture_output=True, text=True)
    elapsed = time.perf_counter() - start
    if done.returncode:
        raise SystemExit(done.stderr)
    return elapsed


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp())
    path = folder / "cohort.csv"
    write_csv(path, args.rows)
    out = folder / "result.json"
    hazel = [
        sys.executable, "-m", "app", "analyze", str(path), "--backend", "memory",
        "--time", "days", "--event", "status", "--group", "site",
        "--covariates", "age,sex,bmi,smoker,stage", "--categorical", "sex", "--json", str(out),
    ]  # fmt: skip
    scripted = [sys.executable, "-c", SCRIPTED, str(path)]
    times = {"hazel": [], "scripted": []}
    for _ in range(args.repeats):
        times["scripted"].append(run(scripted))
        times["hazel"].append(run(hazel))
    result = json.loads(out.read_text())
    size = path.stat().st_size / 2**20
    print(f"{args.rows:,} rows, {size:.0f} MiB CSV; {args.repeats} runs each, alternating")
    for name, values in times.items():
        print(f"  {name}: " + ", ".join(f"{v:.2f}" for v in values) + f" s; best {min(values):.2f}")
    print(f"  ratio Hazel / pandas + lifelines (best runs): "
          f"{min(times['hazel']) / min(times['scripted']):.2f} (target <= 1.0)")  # fmt: skip
    coefs = {(t["variable"], t["level"]): round(t["coef"], 6) for t in result["cox"]["terms"]}
    print(f"  Hazel's log-rank statistic {result['comparison']['statistic']:.4f}; Cox {coefs}")


if __name__ == "__main__":
    main()
