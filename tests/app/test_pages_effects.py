"""The Effects in depth page and the Regression page's standard errors, in Streamlit's AppTest,
on the compressor-service demo (episodes of one unit, recurrent failures). The numbers shown are
the command line's (engine.analysis.run.run_analysis) for the same roles and choices."""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

from app import data, share_section, state
from engine.analysis.run import run_analysis
from engine.cox.subgroups import CAUTION
from engine.io.tables import read_table
from engine.prepare.checks import prepare

ROOT = Path(__file__).resolve().parents[2]
ENTRY = str(ROOT / "app" / "hazel.py")
DEMO = ROOT / "demo_data" / "compressor_service.csv"


@pytest.fixture(scope="module")
def page() -> AppTest:
    at = AppTest.from_file(ENTRY, default_timeout=240).run()
    fresh: dict = {}
    data.open_demo(fresh, DEMO)
    for key, value in fresh.items():
        at.session_state[key] = value
    at.run()
    at.switch_page("views/effects.py").run()
    assert not at.exception, [e.message for e in at.exception]
    return at


def _expected(at: AppTest) -> dict:
    roles = at.session_state[state.ROLES]
    table = read_table(DEMO)
    settings = share_section.settings_from_session(at.session_state, roles)
    return run_analysis(prepare(table.frame, roles), settings, table.frame)


def test_demo_roles_read_episodes_with_robust_errors(page):
    roles = page.session_state[state.ROLES]
    assert (roles.entry, roles.id, roles.group) == ("from_day", "unit_id", "coating")


def test_spline_split_and_subgroups_show_the_command_line_numbers(page):
    page.multiselect(key="effects_split_changing").set_value(["vibration_mm_s"]).run()
    page.text_input(key="effects_split_times").set_value("365").run()
    page.multiselect(key="effects_subgroups_variables").set_value(["site"]).run()
    assert not page.exception, [e.message for e in page.exception]
    expected = _expected(page)
    spline = expected["cox"]["splines"][0]
    assert spline["variable"] == "vibration_mm_s"
    shown = page.dataframe[0].value
    assert shown["Non-linearity p"].iloc[0] == (
        "< 0.001"
        if spline["nonlinearity"]["p_value"] < 0.001
        else f"{spline['nonlinearity']['p_value']:.3f}"
    )
    split = expected["cox"]["time_split"]
    assert split["periods"] == ["up to 365", "after 365"]
    terms = page.dataframe[1].value
    assert list(terms["Term"][:2]) == ["vibration_mm_s, up to 365", "vibration_mm_s, after 365"]
    assert terms["Hazard ratio"].iloc[0] == f"{split['model']['terms'][0]['hazard_ratio']:.3f}"
    rows = page.dataframe[3].value
    overall = expected["subgroups"]["overall"]
    assert rows["Subgroup"].iloc[0] == "All subjects"
    assert rows["Hazard ratio"].iloc[0] == f"{overall['hazard_ratio']:.3f}"
    assert rows["Subjects"].iloc[0] == 500
    assert any(CAUTION in w.value for w in page.warning)


def test_display_switch_reruns_quickly(page):
    start = time.perf_counter()
    page.toggle(key="effects_spline_band").set_value(False).run()
    assert not page.exception
    assert page.session_state["effects_spline_band"] is False
    print(f"band switch rerun: {time.perf_counter() - start:.2f} s")  # measured, not asserted


def test_choices_go_into_the_recipe_and_come_back(page):
    roles = page.session_state[state.ROLES]
    settings = share_section.settings_from_session(page.session_state, roles)
    assert settings["cox"]["splines"] == [{"variable": "vibration_mm_s", "knots": 4}]
    assert settings["cox"]["split"] == {"times": [365.0], "changing": ["vibration_mm_s"]}
    assert settings["subgroups"] == {"variables": ["site"], "groups": 2}
    recipe = share_section.recipe_from_session(page.session_state)
    fresh = {state.TABLE: read_table(DEMO), state.ROLES: roles}
    share_section.restore_recipe(fresh, recipe)
    assert fresh["effects_split_times"] == "365"
    assert fresh["effects_spline_variables"] == ["vibration_mm_s"]
    assert fresh["effects_subgroups_variables"] == ["site"]


def test_regression_page_shows_robust_errors(page):
    page.switch_page("views/regression.py").run()
    assert not page.exception, [e.message for e in page.exception]
    table = page.dataframe[0].value
    assert "SE (model-based)" in table.columns
    assert any("robust, clustered by unit\\_id" in c.value for c in page.caption)
    page.radio(key="model_variance").set_value("Model-based").run()
    assert "SE (model-based)" not in page.dataframe[0].value.columns


def _split_page(tmp_path, frame: pd.DataFrame, covariate: str, times: str) -> AppTest:
    """The Effects over time tab on a file of the test's own (months, died, one covariate), the
    covariate's effect allowed to change at ``times``."""
    path = tmp_path / "split.csv"
    frame.to_csv(path, index=False)
    at = AppTest.from_file(ENTRY, default_timeout=240).run()
    fresh: dict = {}
    data.open_upload(fresh, path.read_bytes(), path.name)
    fresh[state.ROLES] = fresh[state.ROLES_SUGGESTED].to_roles(
        time="months", event="died", event_values=(1,), covariates=(covariate,), group=None
    )
    for key, value in fresh.items():
        at.session_state[key] = value
    at.run()
    at.switch_page("views/effects.py").run()
    at.text_input(key="effects_split_times").set_value(times).run()
    at.multiselect(key="effects_split_changing").set_value([covariate]).run()
    assert not at.exception, [e.message for e in at.exception]
    return at


def test_effects_over_time_keeps_rows_at_time_zero(tmp_path):
    rng = np.random.default_rng(22)
    months = np.round(rng.exponential(20, 150), 1)
    months[:5] = 0.0
    died = rng.integers(0, 2, 150)
    died[:2] = 1
    frame = pd.DataFrame({"months": months, "died": died, "age": rng.normal(60, 9, 150).round()})
    at = _split_page(tmp_path, frame, "age", "10")
    assert not at.error, [e.value for e in at.error]
    terms = next(d.value for d in at.dataframe if "Term" in d.value.columns)
    assert list(terms["Term"]) == ["age, up to 10", "age, after 10"]
    assert next(m.value for m in at.metric if m.label == "Events") == str(int(died.sum()))


def test_a_refit_that_cannot_be_computed_shows_the_reason_not_a_key_error(tmp_path):
    # split after the last time: the later period's column is 0 on every row
    frame = pd.DataFrame(
        {"months": [1, 2, 3, 4, 5, 6, 20, 30, 40, 50], "died": [1, 1, 1, 1, 1, 0, 1, 0, 1, 0],
         "dose": [1, 0, 1, 0, 1, 0, 1, 0, 1, 0]}
    )  # fmt: skip
    at = _split_page(tmp_path, frame, "dose", "100")
    errors = [e.value for e in at.error]
    assert any("could not be computed" in e and "single value" in e for e in errors), errors
    assert not any("unexpectedly" in e for e in errors), errors
