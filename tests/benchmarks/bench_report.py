"""Time and size of the HTML report on 1,000,000 rows (run by hand: python this file).

The report draws the Kaplan–Meier figure from thinned vertices, so its size should not grow with
the number of rows; this measures the engine work, the drawing and the file size separately.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd

from app.batch import curve_figure, report_from_json_and_results
from app.report_html import figure_svg
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles
from engine.survival.summary import comparison_json, curves_json

N = 1_000_000


class _Table:
    """The parts of an ImportedTable the report reads."""

    def __init__(self, frame: pd.DataFrame):
        self.frame = frame
        self.source_name = "simulated.csv"

    def fingerprint(self) -> dict:
        return {"sha256": "0" * 64, "rows": len(self.frame), "columns": list(self.frame.columns)}


def main() -> None:
    rng = np.random.default_rng(20261202)
    group = rng.choice(["A", "B", "C"], size=N)
    scale = np.select([group == "A", group == "B"], [10.0, 14.0], 20.0)
    event_time = rng.weibull(1.3, size=N) * scale
    censor_time = rng.uniform(0, 40, size=N)
    frame = pd.DataFrame(
        {
            "time": np.round(np.minimum(event_time, censor_time), 3),
            "event": (event_time <= censor_time).astype(int),
            "arm": group,
        }
    )
    prepared = prepare(frame, Roles(time="time", event="event", group="arm", unit="months"))
    settings = {"curves": {"times": [6, 12]}, "comparison": {"test": "logrank"}}
    start = time.perf_counter()
    results = {
        "schema": 1,
        "data": prepared.report.to_dict(),
        "curves": curves_json(prepared.frame, [6, 12]),
        "comparison": comparison_json(prepared.frame),
    }
    engine_s = time.perf_counter() - start
    start = time.perf_counter()
    svg = figure_svg(curve_figure(prepared, settings))
    figure_s = time.perf_counter() - start
    start = time.perf_counter()
    html = report_from_json_and_results(
        results, settings, imported=_Table(frame), prepared=prepared
    )
    report_s = time.perf_counter() - start
    print(f"rows {N:,}")
    print(f"engine JSON sections: {engine_s:.2f} s")
    print(f"KM figure (curves, thinning, numbers at risk, SVG): {figure_s:.2f} s, {len(svg):,} B")
    print(f"whole report: {report_s:.2f} s, {len(html):,} bytes")


if __name__ == "__main__":
    main()
