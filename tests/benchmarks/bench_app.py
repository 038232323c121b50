"""App speed on 1,000,000 rows (a measurement, not a test): python tests/benchmarks/bench_app.py

Measures, on an invented 1,000,000-row dataset with four groups and continuous times:
1. the engine's own Kaplan–Meier compute time (``curves_by_group`` on the prepared frame);
2. the first KM figure: the app's path from prepared data to a finished Vega-Lite spec
   (engine curves, drawing frame, thinning, chart building), with empty caches;
3. the whole Curves page on its first visit, in AppTest (figure, numbers at risk, summary);
4. a display-switch rerun of the Curves page (interval band off), in AppTest;
and how many vertices the figure sends to the browser.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

N = 1_000_000


def make_table():
    from engine.io.tables import read_table

    rng = np.random.default_rng(20261202)
    group = rng.choice(["Alder", "Birch", "Cedar", "Dogwood"], N)
    scale = pd.Series(group).map({"Alder": 30.0, "Birch": 40.0, "Cedar": 55.0, "Dogwood": 25.0})
    failure = scale.to_numpy() * rng.weibull(1.3, N)
    censor = rng.uniform(0, 80, N)
    frame = pd.DataFrame(
        {
            "months": np.round(np.minimum(failure, censor), 4),
            "failed": (failure <= censor).astype(int),
            "grove": group,
            "load": np.round(rng.normal(10, 2, N), 2),
        }
    )
    data = frame.to_csv(index=False).encode()
    return read_table(data, name="bench.csv")


def timed(function, repeat: int = 1):
    times = []
    result = None
    for _ in range(repeat):
        start = time.perf_counter()
        result = function()
        times.append(time.perf_counter() - start)
    return result, times


def main() -> None:
    import streamlit as st
    from streamlit.testing.v1 import AppTest

    from app import charts, compute, data, state
    from engine.prepare.checks import prepare
    from engine.prepare.roles import Roles
    from engine.survival.curves import curves_by_group

    table, (load_time,) = timed(make_table)
    roles = Roles(time="months", unit="months", event="failed", group="grove", covariates=())
    prepared, (prepare_time,) = timed(lambda: prepare(table.frame, roles))
    _, engine_times = timed(lambda: curves_by_group(prepared.frame), repeat=3)
    engine_km = statistics.median(engine_times)

    roles_text = data.roles_key(roles)
    style = charts.ChartStyle()

    def first_figure():
        st.cache_data.clear()
        st.cache_resource.clear()
        data.prepared_by_key(table.sha256, roles_text, table)  # prepared data is in hand already
        start = time.perf_counter()
        drawing = compute.curve_drawing(
            table.sha256,
            roles_text,
            compute.SURVIVAL,
            0.95,
            "log-log",
            True,
            (style.width, style.height),
            None,
            table,
        )
        chart = charts.step_curve_chart(
            drawing["curves"],
            style,
            charts.group_colours(list(prepared.frame["_group"].cat.categories)),
            censored=drawing["censored"],
            y_domain=drawing["y_domain"],
            x_max=drawing["x_upper"],
            ticks=charts.nice_ticks(drawing["x_upper"]),
        )
        charts.finish(chart, style)
        return drawing, time.perf_counter() - start

    figure_times = []
    for _ in range(2):
        drawing, seconds = first_figure()
        figure_times.append(seconds)
    first_km = min(figure_times)

    st.cache_data.clear()
    st.cache_resource.clear()
    at = AppTest.from_file(str(ROOT / "app" / "hazel.py"), default_timeout=600)
    at.session_state[state.TABLE] = table
    at.session_state[state.ROLES] = roles
    at.session_state[state.DATASET_LABEL] = "bench.csv"
    at.session_state[state.DATASET_IS_DEMO] = False
    at.run()  # data import page: prepares the data for the sidebar
    _, (page_first,) = timed(lambda: at.switch_page("views/curves.py").run())
    assert not at.exception, at.exception
    switch_times = []
    for value in (False, True, False, True):
        _, (seconds,) = timed(lambda v=value: at.toggle(key="curves_band").set_value(v).run())
        switch_times.append(seconds)
    _, (presentation,) = timed(lambda: at.toggle(key=state.PRESENTATION).set_value(True).run())
    assert not at.exception, at.exception

    print(f"rows: {N:,}; distinct times: {prepared.frame['_time'].nunique():,}")
    print(f"make + read_table: {load_time:.2f} s; prepare: {prepare_time:.2f} s")
    print(f"engine curves_by_group (median of 3): {engine_km:.3f} s")
    print(
        f"first KM figure (engine + drawing + thinning + spec): {first_km:.3f} s "
        f"= {first_km / engine_km:.2f} x the engine"
    )
    print(
        f"vertices: {drawing['vertices']:,} -> drawn {len(drawing['curves']):,}; "
        f"censoring marks drawn {len(drawing['censored']):,}"
    )
    print(f"Curves page first visit (AppTest, whole page): {page_first:.2f} s")
    print(
        "display switch reruns (AppTest, band off/on): "
        + ", ".join(f"{t:.3f}" for t in switch_times)
        + f" s; median {statistics.median(switch_times):.3f} s"
    )
    print(f"presentation switch rerun (new chart size, re-thinned): {presentation:.3f} s")


if __name__ == "__main__":
    main()
