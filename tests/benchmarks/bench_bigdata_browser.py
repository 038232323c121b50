"""Display switches of the big-data Curves page in headless Chromium (a measurement, not a
test): ``.venv/bin/python tests/benchmarks/bench_bigdata_browser.py [--rows N]``.

Writes an invented registry of N rows (default 10,000,000) as a Parquet folder in a temporary
data folder, opens it from the Data import page (DuckDB), waits for the Curves page, then times
from the click to the redrawn figure for the "Interval band" and "Censoring marks" toggles: the
aggregates are cached, so a switch must not touch the rows again.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.app.browser import demo_page, run_server, wait_until_idle  # noqa: E402
from tests.benchmarks.bench_effects_browser import timed_toggle  # noqa: E402
from tests.benchmarks.bench_scale import build  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=10_000_000)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp()) / "data"
    (folder / "registry").mkdir(parents=True)
    build(folder / "registry" / "part-0.parquet", args.rows, age_decimals=0)
    os.environ["HAZEL_DATA_FOLDER"] = str(folder)
    server = run_server()
    url = next(server)
    results = {}
    try:
        with demo_page(url) as (page, _errors):
            page.locator(".st-key-import_folder_open_button button").click()
            wait_until_idle(page)
            start = time.perf_counter()
            page.get_by_role("link", name="Curves").first.click()
            page.get_by_text("Computed where the data are", exact=False).first.wait_for(
                timeout=600_000
            )
            first = time.perf_counter() - start
            wait_until_idle(page)
            for label in ("Interval band", "Censoring marks"):
                results[label] = [timed_toggle(page, label) for _ in range(6)]
    finally:
        next(server, None)
    print(f"Big-data Curves page, {args.rows:,} rows in a Parquet folder (DuckDB)")
    print(f"  first visit (checks and counts in DuckDB, figure): {first:.1f} s")
    for name, values in results.items():
        print(
            f"  {name}: " + ", ".join(f"{v:.2f}" for v in values)
            + f" s; median {statistics.median(values):.2f} s"
        )  # fmt: skip


if __name__ == "__main__":
    main()
