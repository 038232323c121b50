"""The Competing risks page's Gray's test and Fine–Gray model, and the Prediction performance
page, in Streamlit's AppTest: the numbers shown are the engine's on the same demo and roles."""

from __future__ import annotations

import pytest
from streamlit.testing.v1 import AppTest

from app import data, state
from engine.analysis.run import categorical_covariates
from engine.competing.fine_gray import fit_fine_gray
from engine.competing.gray_test import gray_tests
from engine.cox.fit import fit_cox
from engine.io.tables import read_table
from engine.prediction.optimism import bootstrap_optimism
from engine.prediction.performance import prediction_performance
from engine.prepare.checks import prepare
from tests.app.test_pages_beyond import DEMO, _metric, _open


def _table(at: AppTest, column: str):
    return next(d.value for d in at.dataframe if column in d.value.columns)


@pytest.fixture(scope="module")
def dairy_page():
    at = _open("views/competing.py", "dairy_herd.csv")  # opens with died and sold named
    sold = next(
        t for t in at.text_input if t.key.startswith("cr_cause_") and t.label.endswith("sold")
    )
    assert sold.value == "sold"
    assert at.selectbox(key="cr_fine_gray").value == "(none)"  # fitted only when asked for
    at.selectbox(key="cr_fine_gray").select("died").run()
    assert not at.exception, [e.message for e in at.exception]
    return at


def test_gray_test_and_fine_gray_model_show_the_engine_numbers(dairy_page):
    at = dairy_page
    roles = at.session_state[state.ROLES]
    prepared = prepare(read_table(DEMO / "dairy_herd.csv").frame, roles)
    expected = gray_tests(prepared.frame)
    shown = _table(at, "χ² statistic")
    assert list(shown["Cause"]) == [t.cause for t in expected]
    assert list(shown["χ² statistic"]) == [f"{t.statistic:.2f}" for t in expected]
    model = fit_fine_gray(
        prepared.frame,
        list(roles.covariates),
        "died",
        categorical=categorical_covariates(prepared.frame, roles.covariates),
        reference=dict(roles.reference),
    )
    table = _table(at, "Subdistribution hazard ratio")
    assert list(table["Subdistribution hazard ratio"]) == [
        f"{t.estimate.hazard_ratio:.3f}" for t in model.terms
    ]
    assert any("does not say by how much" in i.value for i in at.info)


def test_fine_gray_can_be_left_out(dairy_page):
    at = dairy_page
    at.selectbox(key="cr_fine_gray").select("(none)").run()
    assert not at.exception
    assert not any("Subdistribution hazard ratio" in d.value.columns for d in at.dataframe)
    at.selectbox(key="cr_fine_gray").select("sold").run()
    assert not at.exception
    assert _metric(at, "Events of sold") != ""


def test_performance_page_shows_the_engine_measures_and_runs_the_bootstrap():
    at = _open("views/performance.py", "pump_bearings.csv")
    table = read_table(DEMO / "pump_bearings.csv")
    roles = at.session_state[state.ROLES]
    prepared = prepare(table.frame, data.model_roles(roles))
    model = fit_cox(
        prepared.frame,
        list(roles.covariates),
        categorical=categorical_covariates(prepared.frame, roles.covariates),
        reference=dict(roles.reference),
    )
    times = sorted(float(t) for t in at.text_input(key="perf_times").value.split(","))
    expected = prediction_performance(model, times, calibration_time=times[0])
    assert _metric(at, "Harrell's C") == f"{expected.harrell_c:.3f}"
    assert _metric(at, "Uno's C") == f"{expected.uno_c:.3f}"
    assert _metric(at, "Integrated Brier score") == f"{expected.integrated_brier:.3f}"
    shown = _table(at, "Observed survival")
    assert list(shown["Observed survival"]) == [f"{v:.3f}" for v in expected.calibration.observed]
    at.selectbox(key="perf_calibration_time").select(f"{times[-1]:g}").run()
    later = prediction_performance(model, times, calibration_time=times[-1], risk_groups=5)
    shown = _table(at, "Observed survival")
    assert list(shown["Predicted survival"]) == [f"{v:.3f}" for v in later.calibration.predicted]
    at.number_input(key="perf_replicates").set_value(3).run()
    at.button(key="perf_run_button").click().run()
    assert not at.exception, [e.message for e in at.exception]
    optimism = bootstrap_optimism(model, replicates=3, seed=at.number_input(key="perf_seed").value)
    assert _metric(at, "Optimism-corrected C") == f"{optimism.c:.3f}"
    assert _metric(at, "Calibration slope") == f"{optimism.slope:.3f}"
