"""Display switches of the Fine–Gray and Prediction performance pages on 100,000 rows, in
AppTest (a measurement, not a test): python tests/benchmarks/bench_finegray_app.py [n_rows]

Measured: the first visit of each page (fits included) and then reruns after a display switch:
on the Competing risks page the covariate whose levels the predicted-incidence curves show, on
the Prediction performance page the calibration time and the number of risk groups.
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


def make_table(n: int):
    from engine.io.tables import read_table

    rng = np.random.default_rng(20261202)
    site = rng.choice(["north", "south", "east"], n)
    age = np.round(rng.normal(60, 10, n), 1)
    t1 = rng.weibull(1.3, n) * np.exp(2.0 + 0.02 * (age - 60) + 0.3 * (site == "south"))
    t2 = rng.exponential(15.0, n)
    cens = rng.uniform(0.5, 25.0, n)
    time_ = np.minimum.reduce([t1, t2, cens])
    status = np.select([time_ == t1, time_ == t2], ["relapse", "death"], "censored")
    frame = pd.DataFrame({"months": np.round(time_, 4), "status": status, "site": site, "age": age})
    return read_table(frame.to_csv(index=False).encode(), name="bench.csv")


def rerun(at, action) -> float:
    start = time.perf_counter()
    action()
    seconds = time.perf_counter() - start
    assert not at.exception, [e.message for e in at.exception]
    return seconds


def main() -> None:
    from streamlit.testing.v1 import AppTest

    from app import state
    from engine.prepare.roles import Roles

    n = int(sys.argv[1]) if len(sys.argv) > 1 else 100_000
    table = make_table(n)
    roles = Roles(
        time="months",
        unit="months",
        event="status",
        event_values=("relapse",),
        event_causes=(("relapse", "relapse"), ("death", "death")),
        group="site",
        covariates=("age", "site"),
        categorical=("site",),
    )
    at = AppTest.from_file(str(ROOT / "app" / "hazel.py"), default_timeout=900)
    at.session_state[state.TABLE] = table
    at.session_state[state.ROLES] = roles
    at.session_state[state.DATASET_LABEL] = "bench.csv"
    at.session_state[state.DATASET_IS_DEMO] = False
    at.session_state["cr_fine_gray"] = "relapse"
    at.run()
    first = rerun(at, lambda: at.switch_page("views/competing.py").run())
    switches = [
        rerun(at, lambda v=v: at.selectbox(key="cr_fg_profile").select(v).run())
        for v in ("site", "age", "site", "age")
    ]
    km_switch = [
        rerun(at, lambda v=v: at.toggle(key="cr_show_km").set_value(v).run())
        for v in (False, True, False, True)
    ]
    at.selectbox(key="cr_fine_gray").select("(none)").run()
    without = [
        rerun(at, lambda v=v: at.toggle(key="cr_show_km").set_value(v).run())
        for v in (False, True, False, True)
    ]
    at.selectbox(key="cr_fine_gray").select("relapse").run()
    print(f"{n:,} rows")
    print(f"Competing risks page, first visit (incidence, Gray, Fine–Gray): {first:.2f} s")
    print(
        "  predicted-incidence covariate switch: "
        + ", ".join(f"{s:.3f}" for s in switches)
        + f" s; median {statistics.median(switches):.3f} s (the first of each is new)"
    )
    print(
        "  1 − KM switch with the Fine–Gray model shown: "
        + ", ".join(f"{s:.3f}" for s in km_switch)
        + f" s; median {statistics.median(km_switch):.3f} s; without it: median "
        f"{statistics.median(without):.3f} s"
    )
    first = rerun(at, lambda: at.switch_page("views/performance.py").run())
    times = at.text_input(key="perf_times").value.split(",")
    options = [t.strip() for t in times]
    switches = [
        rerun(at, lambda v=v: at.selectbox(key="perf_calibration_time").select(v).run())
        for v in (options[-1], options[0], options[-1], options[0])
    ]
    groups = [
        rerun(at, lambda v=v: at.number_input(key="perf_risk_groups").set_value(v).run())
        for v in (10, 5, 10, 5)
    ]
    print(f"Prediction performance page, first visit (Cox fit, measures): {first:.2f} s")
    print(
        "  calibration-time switch: "
        + ", ".join(f"{s:.3f}" for s in switches)
        + f" s; median {statistics.median(switches):.3f} s"
    )
    print(
        "  risk-groups switch: "
        + ", ".join(f"{s:.3f}" for s in groups)
        + f" s; median {statistics.median(groups):.3f} s"
    )


if __name__ == "__main__":
    main()
