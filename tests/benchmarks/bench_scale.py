"""Big data: ``analyze --backend duckdb`` on a large Parquet file against one DuckDB GROUP BY.

Builds (once, in /tmp unless --path is given) an invented Parquet file of N rows with 4 columns:
``days`` (whole days, ~3,650 distinct), ``died`` (0/1), ``arm`` (control / treated) and ``age``
(whole years, as a registry holds it: ~0.9 M distinct cells in 100 M rows; ``--age-decimals 1``
gives one decimal, ~6.7 M distinct cells, the stress case). Then measures, in the same run:

- one DuckDB pass ``SELECT arm, days, died, COUNT(*) ... GROUP BY`` over the file (the baseline);
- ``python -m app analyze FILE --backend duckdb`` with the group ``arm`` and a 2-term Cox model
  (``arm`` and ``age``), in a fresh process, its wall time and peak resident memory;
- the curves and log-rank test checked against statsmodels' frequency-weighted Kaplan–Meier on
  the baseline's counts (the aggregated data), and the row count.

    .venv/bin/python tests/benchmarks/bench_scale.py --rows 100000000 [--keep] [--age-decimals 1]

Without --keep the generated file is deleted afterwards.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

ROOT = Path(__file__).resolve().parents[2]
CHUNK = 5_000_000


def build(path: Path, rows: int, seed: int = 2026, age_decimals: int = 1) -> None:
    rng = np.random.default_rng(seed)
    schema = pa.schema(
        [("days", pa.float64()), ("died", pa.int8()), ("arm", pa.string()), ("age", pa.float64())]
    )
    with pq.ParquetWriter(path, schema, compression="snappy") as writer:
        done = 0
        while done < rows:
            n = min(CHUNK, rows - done)
            treated = rng.random(n) < 0.5
            age = np.round(rng.normal(64, 10, n), age_decimals)
            rate = np.exp(-7.0 + 0.03 * (age - 64) - 0.25 * treated)
            event_time = rng.exponential(1 / rate)
            censor_time = rng.uniform(30, 3650, n)
            days = np.ceil(np.minimum(event_time, censor_time))
            arm = np.where(treated, "treated", "control")
            table = pa.table(
                {
                    "days": days,
                    "died": (event_time <= censor_time).astype(np.int8),
                    "arm": pa.array(arm).dictionary_encode(),
                    "age": age,
                },
            ).cast(schema)
            writer.write_table(table)
            done += n


def baseline(path: Path):
    import duckdb

    connection = duckdb.connect()
    start = time.perf_counter()
    counts = connection.execute(
        f"SELECT arm, days, died, COUNT(*) AS n FROM read_parquet('{path}') GROUP BY ALL"
    ).df()
    return time.perf_counter() - start, counts


def hazel(path: Path, out: Path):
    command = [
        sys.executable, "-m", "app", "analyze", str(path), "--backend", "duckdb",
        "--time", "days", "--event", "died", "--group", "arm", "--covariates", "arm,age",
        "--times", "365,1825", "--json", str(out),
    ]  # fmt: skip
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    start = time.perf_counter()
    done = subprocess.run(command, cwd=ROOT, capture_output=True, text=True)
    elapsed = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss  # KiB, the largest child
    if done.returncode:
        raise SystemExit(done.stderr)
    return elapsed, max(peak, before) / 2**20, json.loads(out.read_text())


def check_against_references(counts, result) -> str:
    from statsmodels.duration.survfunc import SurvfuncRight

    lines = []
    rows = int(counts["n"].sum())
    assert result["data"]["rows_used"] == rows, (result["data"]["rows_used"], rows)
    for curve in result["curves"][1:]:
        part = counts[counts["arm"] == curve["group"]]
        km = SurvfuncRight(part["days"], part["died"], freq_weights=part["n"])
        for point in curve["at_times"]:
            at = np.searchsorted(km.surv_times, point["time"], side="right") - 1
            reference = float(km.surv_prob[at])
            gap = abs(reference - point["survival"]) / reference
            assert gap < 1e-9, (curve["group"], point, reference)
            lines.append(f"S({point['time']:g}) {curve['group']}: {point['survival']:.6f}")
    return "; ".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=100_000_000)
    parser.add_argument("--path", type=Path)
    parser.add_argument("--keep", action="store_true")
    parser.add_argument(
        "--age-decimals",
        type=int,
        default=0,
        help="decimals of the age column (0, the default: whole years, as registries hold it)",
    )
    args = parser.parse_args()
    stem = f"hazel_bench_{args.rows}" + (
        f"_age{args.age_decimals}" if args.age_decimals != 1 else ""
    )  # the one-decimal file keeps its earlier name
    path = args.path or Path(tempfile.gettempdir()) / f"{stem}.parquet"
    if not path.exists():
        start = time.perf_counter()
        build(path, args.rows, age_decimals=args.age_decimals)
        print(f"built {path} ({path.stat().st_size / 2**20:.0f} MiB) in "
              f"{time.perf_counter() - start:.0f} s")  # fmt: skip
    try:
        base, counts = baseline(path)
        out = Path(tempfile.mkdtemp()) / "result.json"
        elapsed, peak_gib, result = hazel(path, out)
        checked = check_against_references(counts, result)
        base_again, _ = baseline(path)
        best_base = min(base, base_again)
        print(f"rows: {args.rows:,}; distinct (arm, days, died) cells: {len(counts):,}")
        print(f"DuckDB GROUP BY pass: {base:.2f} s and {base_again:.2f} s (best {best_base:.2f})")
        print(f"Hazel analyze --backend duckdb: {elapsed:.2f} s, peak RSS {peak_gib:.2f} GiB")
        print(f"ratio: {elapsed / best_base:.2f} (target <= 10); memory target <= 4 GiB")
        cox = result["cox"]
        terms = [(t["variable"], t["level"], round(t["hazard_ratio"], 5)) for t in cox["terms"]]
        print("Cox:", terms)
        print("checked against statsmodels on the aggregated counts:", checked)
    finally:
        if not args.keep and args.path is None:
            os.remove(path)


if __name__ == "__main__":
    main()
