"""Peak memory of an import per cell and per byte of file, and import + role suggestion time of
wide files (issue 10 item 13). Run by hand:
``.venv/bin/python tests/benchmarks/bench_import_memory.py``. Each file is read in a fresh
interpreter; peak resident memory is read from /proc (VmHWM) against the started interpreter.
``engine.io.memory.BYTES_PER_CELL`` must stay above the largest bytes-per-cell figure printed.
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

MEASURE = """
import json, sys, time
sys.path.insert(0, {root!r})
from engine.io.tables import read_table
from engine.prepare.roles import suggest_roles
def peak():
    with open("/proc/self/status") as handle:
        for line in handle:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
before = peak()
start = time.perf_counter()
table = read_table(sys.argv[1])
read = time.perf_counter() - start
start = time.perf_counter()
suggest_roles(table.frame)
suggest = time.perf_counter() - start
rows, columns = table.frame.shape
print(json.dumps({{"growth": peak() - before, "cells": rows * columns, "read": read,
                  "suggest": suggest, "columns": columns}}))
"""


def write_files(folder: Path, rows: int) -> dict[str, Path]:
    rng = np.random.default_rng(0)
    files = {}
    path = folder / "digits.csv"
    pd.DataFrame(rng.integers(0, 10, (rows, 20))).add_prefix("c").to_csv(path, index=False)
    files["single digits, 20 columns"] = path
    path = folder / "short_text.csv"
    pd.DataFrame(
        {
            "time": rng.integers(1, 99, rows),
            "event": rng.integers(0, 2, rows),
            "a": rng.choice(list("abcdefgh"), rows),
            "b": rng.choice(["x", "yy"], rows),
        }
    ).to_csv(path, index=False)
    files["short text"] = path
    path = folder / "mixed.csv"
    pd.DataFrame(
        {
            "id": np.arange(rows),
            "time": rng.exponential(300, rows).round(1),
            "event": rng.integers(0, 2, rows),
            "site": rng.choice(["north", "south", "east", "west"], rows),
            "age": rng.normal(60, 10, rows).round(1),
            "start": pd.Timestamp("2015-01-01")
            + pd.to_timedelta(rng.integers(0, 3000, rows), unit="D"),
            "note": rng.choice(["ok", "check later", "lost to follow-up"], rows),
        }
    ).to_csv(path, index=False)
    files["mixed (ids, numbers, dates, text)"] = path
    for width in (1_000, 5_000, 10_000):
        path = folder / f"wide{width}.csv"
        frame = pd.DataFrame(rng.integers(0, 100, (200, width))).add_prefix("v")
        frame.insert(0, "time", rng.exponential(5, 200).round(2))
        frame.to_csv(path, index=False)
        files[f"200 rows x {width:,} columns"] = path
    return files


def main() -> None:
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    with tempfile.TemporaryDirectory() as folder:
        files = write_files(Path(folder), rows)
        print("| file | size | cells | peak growth | bytes per cell | x file | read | suggest |")
        print("|---|---|---|---|---|---|---|---|")
        for name, path in files.items():
            done = subprocess.run(
                [sys.executable, "-c", MEASURE.format(root=str(ROOT)), str(path)],
                capture_output=True,
                text=True,
                check=True,
            )
            m = json.loads(done.stdout)
            size = path.stat().st_size
            print(
                f"| {name} | {size / 1e6:.1f} MB | {m['cells']:,} | {m['growth'] / 1e6:.0f} MB | "
                f"{m['growth'] / m['cells']:.1f} | {m['growth'] / size:.1f} | {m['read']:.2f} s | "
                f"{m['suggest']:.2f} s ({1000 * m['suggest'] / m['columns']:.2f} ms/column) |"
            )


if __name__ == "__main__":
    main()
