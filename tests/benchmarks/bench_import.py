"""Import + roles + checks of a 1,000,000-row, 12-column CSV against plain pandas/pyarrow.

Run by hand: ``.venv/bin/python tests/benchmarks/bench_import.py [rows]``. Targets (issue 2):
time within 1.5x of ``pandas.read_csv(path, engine="pyarrow")``; peak memory under 3x the loaded
frame. Each measurement runs in a fresh interpreter so peak resident memory is its own; the
figures are the best of five interleaved runs, because timings on a shared machine are noisy.
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
ROLES = {
    "time": "time",
    "event": "status",
    "group": "arm",
    "id": "id",
    "covariates": ["age", "sex", "stage", "x1", "x2", "x3", "x4", "x5"],
    "categorical": ["stage"],
}

MEASURE = """
import json, sys, time
sys.path.insert(0, {root!r})
import pandas as pd
from engine.prepare.checks import prepare
from engine.io.tables import read_table
from engine.prepare.roles import Roles, suggest_roles
path, mode = sys.argv[1], sys.argv[2]
def status(key):
    # /proc is used because ru_maxrss survives exec and would carry the parent's peak.
    with open("/proc/self/status") as handle:
        line = next(line for line in handle if line.startswith(key + ":"))
    return int(line.split()[1]) / 1024
before = status("VmRSS")
start = time.perf_counter()
if mode == "pandas":
    frame = pd.read_csv(path, engine="pyarrow")
    stages = {{}}
else:
    table = read_table(path)
    read = time.perf_counter()
    suggest_roles(table.frame)
    prepared = prepare(table.frame, Roles.from_dict({roles!r}))
    frame = table.frame
    stages = {{"read_table_s": read - start, "roles_and_checks_s": time.perf_counter() - read}}
seconds = time.perf_counter() - start
peak = status("VmHWM")
print(json.dumps({{"seconds": seconds, "peak_mb": peak - before, "base_mb": before, **stages,
    "frame_mb": frame.memory_usage(deep=True).sum() / 1024**2}}))
"""


def write_csv(path: Path, rows: int) -> None:
    rng = np.random.default_rng(1)
    frame = pd.DataFrame(
        {
            "id": np.arange(rows),
            "time": rng.exponential(400, rows).round(2),
            "status": rng.integers(0, 2, rows),
            "arm": rng.choice(["arm A", "arm B", "arm C", "arm D"], rows),
            "age": rng.normal(60, 10, rows).round(1),
            "sex": rng.choice(["f", "m"], rows),
            "stage": rng.integers(1, 5, rows),
            **{f"x{i}": rng.normal(size=rows).round(4) for i in range(1, 6)},
        }
    )
    frame.to_csv(path, index=False)


def measure(path: Path, mode: str) -> dict:
    code = MEASURE.format(root=str(ROOT), roles=ROLES)
    done = subprocess.run(
        [sys.executable, "-c", code, str(path), mode], capture_output=True, text=True, check=True
    )
    return json.loads(done.stdout)


def main(rows: int = 1_000_000, repeats: int = 5) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "cohort.csv"
        write_csv(path, rows)
        size_mb = path.stat().st_size / 1024**2
        pandas_runs, hazel_runs = [], []
        for _ in range(repeats):  # interleaved, so a burst of load on the machine hits both
            pandas_runs.append(measure(path, "pandas"))
            hazel_runs.append(measure(path, "hazel"))
    pandas_best = min(r["seconds"] for r in pandas_runs)
    hazel_best = min(r["seconds"] for r in hazel_runs)
    hazel = min(hazel_runs, key=lambda r: r["seconds"])
    result = {
        "rows": rows,
        "file_mb": round(size_mb, 1),
        "pandas_pyarrow_s": round(pandas_best, 3),
        "hazel_import_roles_checks_s": round(hazel_best, 3),
        "time_ratio": round(hazel_best / pandas_best, 2),
        "read_table_s": round(hazel["read_table_s"], 3),
        "roles_and_checks_s": round(hazel["roles_and_checks_s"], 3),
        "all_pandas_s": [round(r["seconds"], 3) for r in pandas_runs],
        "all_hazel_s": [round(r["seconds"], 3) for r in hazel_runs],
        "frame_mb": round(hazel["frame_mb"], 1),
        "hazel_peak_rss_growth_mb": round(max(r["peak_mb"] for r in hazel_runs), 1),
        "pandas_peak_rss_growth_mb": round(max(r["peak_mb"] for r in pandas_runs), 1),
        "interpreter_base_rss_mb": round(hazel["base_mb"], 1),
    }
    result["memory_ratio"] = round(result["hazel_peak_rss_growth_mb"] / result["frame_mb"], 2)
    return result


def test_bench_import():
    """Entry point for ``pytest tests/benchmarks -s`` (prints figures, asserts nothing timed)."""
    print(json.dumps(main(), indent=2))


if __name__ == "__main__":
    print(json.dumps(main(int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000), indent=2))
