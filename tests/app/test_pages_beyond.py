"""The pages beyond the basics, and the Save and share page, in Streamlit's AppTest.

Numbers shown are compared with the engine's own on the same demo file and roles.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

from app import data, share_section, state, ui
from engine.analysis.recipe import Recipe
from engine.analysis.run import run_analysis
from engine.competing.incidence import cumulative_incidence
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import suggest_roles
from engine.survival.landmark import landmark
from engine.survival.sample_size import events_needed
from engine.wording import format_nonzero, format_number, format_percent, format_ratio

ROOT = Path(__file__).resolve().parents[2]
ENTRY = str(ROOT / "app" / "hazel.py")
DEMO = ROOT / "demo_data"
TIMEOUT = 180


def _open(page: str, demo: str | None = None) -> AppTest:
    at = AppTest.from_file(ENTRY, default_timeout=TIMEOUT).run()
    assert not at.exception
    if demo is not None:
        fresh: dict = {}
        data.open_demo(fresh, DEMO / demo)
        for key, value in fresh.items():
            at.session_state[key] = value
        at.run()
    at.switch_page(page).run()
    assert not at.exception, [e.message for e in at.exception]
    return at


def _metric(at: AppTest, label: str) -> str:
    return next(m.value for m in at.metric if m.label == label)


def _errors(at: AppTest) -> list[str]:
    return [e.value for e in at.error]


def _dairy_roles():
    table = read_table(DEMO / "dairy_herd.csv")
    roles = suggest_roles(table.frame).to_roles(**data.DEMO_ROLES["dairy_herd.csv"])
    return table, roles


def test_competing_risks_page_names_causes_and_shows_the_engine_incidence():
    at = _open("views/competing.py", "dairy_herd.csv")
    # the demo was made for competing risks: it opens with both causes named, "died" leading
    boxes = {t.label: t.value for t in at.text_input if t.key.startswith("cr_cause_")}
    assert boxes == {"Cause for sold": "sold", "Cause for in herd": "", "Cause for died": "died"}
    roles = at.session_state[state.ROLES]
    assert [(str(v), n) for v, n in roles.event_causes] == [("died", "died"), ("sold", "sold")]
    assert not any("Only one kind of event" in i.value for i in at.info)
    # the curves are housing x cause, and the legend says so
    chart = at.get("vega_lite_chart")[0].proto
    blobs = [chart.spec.encode(), *(d.data.data for d in chart.datasets)]
    assert any(b"housing: cause" in b for b in blobs)
    assert not any(b"Group: cause" in b for b in blobs)
    assert any("overstates the cumulative incidence" in w.value for w in at.warning)
    table, _ = _dairy_roles()
    prepared = prepare(table.frame, roles)
    result = cumulative_incidence(prepared.frame, by_group=True)
    last = result.to_frame().groupby(["group", "cause"], sort=False).tail(1)
    shown = at.dataframe[0].value
    for row, expected in zip(
        shown["Cumulative incidence"], last["cumulative_incidence"], strict=True
    ):
        assert row.startswith(format_percent(expected))
    assert not _errors(at)


def test_competing_page_asks_for_an_event_column_first():
    at = AppTest.from_file(ENTRY, default_timeout=TIMEOUT).run()
    roles = at.session_state[state.ROLES]
    from dataclasses import replace

    at.session_state[state.ROLES] = replace(roles, event=None, event_values=())
    at.switch_page("views/competing.py").run()
    assert not at.exception
    assert any("event column" in i.value for i in at.info)


def test_parametric_page_shows_the_aic_table_of_the_engine():
    at = _open("views/parametric.py")
    assert not _errors(at)
    table = read_table(DEMO / "pump_bearings.csv")
    roles = at.session_state[state.ROLES]
    sections = run_analysis(prepare(table.frame, roles), {"parametric": {}})
    shown = at.dataframe[0].value
    expected = [f"{r['aic']:,.2f}" for r in sections["parametric"]["aic_table"]]
    assert list(shown["AIC"]) == expected


def test_parametric_page_without_a_model_chosen_says_so():
    at = _open("views/parametric.py")
    at.multiselect(key="param_distributions").set_value([]).run()
    assert not at.exception
    assert any("at least one model" in i.value for i in at.info)


def test_landmark_page_counts_the_subjects_left_out():
    at = _open("views/landmark.py")
    at.number_input(key="landmark_time").set_value(10.0).run()
    assert not at.exception and not _errors(at)
    table = read_table(DEMO / "pump_bearings.csv")
    prepared = prepare(table.frame, at.session_state[state.ROLES])
    selected = landmark(prepared.frame, 10.0)
    assert _metric(at, "Subjects kept") == f"{selected.n_kept:,}"
    assert _metric(at, "Left out") == f"{selected.n_excluded:,}"


def test_landmark_past_follow_up_is_a_message():
    at = _open("views/landmark.py")
    at.number_input(key="landmark_time").set_value(1e6).run()
    assert not at.exception
    assert any("after the last follow-up" in e for e in _errors(at))


def test_sample_size_page_gives_schoenfelds_events():
    at = _open("views/sample_size.py")
    expected = events_needed(0.7, power=0.8, alpha=0.05)
    assert _metric(at, "Events needed") == f"{expected.events:,}"
    assert not _errors(at)


def test_sample_size_page_refuses_a_hazard_ratio_of_one():
    at = _open("views/sample_size.py")
    at.number_input(key="power_hr").set_value(1.0).run()
    assert not at.exception
    assert any("other than 1" in e for e in _errors(at))


def _share_page_with_pumps(widgets: dict) -> tuple[AppTest, dict]:
    """The Save and share page open on the pumps demo, and a session holding the pumps table,
    the roles in use and these widget values (to make a recipe from)."""
    at = _open("views/share.py")
    table = read_table(DEMO / "pump_bearings.csv")
    return at, {state.TABLE: table, state.ROLES: at.session_state[state.ROLES], **widgets}


@pytest.mark.parametrize("restore_filters", [False, True])
def test_restored_recipe_gives_the_pages_the_cli_numbers(tmp_path, restore_filters):
    """Restore a recipe (with a filter) in the app; Curves and Group comparison show the
    numbers the command line computes from the same recipe."""
    from app.batch import load_recipe_run
    from engine.prepare.filters import RowFilter

    at, session = _share_page_with_pumps(
        {"curves_conf": "90%", "curves_times": "12", "compare_test": "peto-peto"}
    )
    if restore_filters:
        session[share_section.FILTERS] = (RowFilter("site", "not_in", ("harbour",)),)
    recipe = share_section.recipe_from_session(session)
    path = tmp_path / "r.json"
    path.write_text(recipe.to_json(), encoding="utf-8")
    run = load_recipe_run(path, DEMO / "pump_bearings.csv")
    cli = run_analysis(run.prepared, run.settings)

    warnings = share_section.restore_recipe(at.session_state, Recipe.from_json(recipe.to_json()))
    assert warnings == []
    at.switch_page("views/comparison.py").run()
    assert not at.exception, [e.message for e in at.exception]
    assert _metric(at, "Chi-squared (χ²)") == format_number(cli["comparison"]["statistic"], 2)
    at.switch_page("views/curves.py").run()
    assert not at.exception
    shown = at.dataframe[0].value
    assert list(shown["Subjects"]) == [c["n"] for c in cli["curves"]]
    assert list(shown["Events"]) == [c["events"] for c in cli["curves"]]
    expected = cli["curves"][0]["at_times"][0]
    at_12 = shown["Probability still free of failure at 12 months"]
    assert at_12.iloc[0].startswith(f"{expected['survival']:.3f}")
    # the recipe downloaded again is the one restored
    again = share_section.recipe_from_session(at.session_state)
    assert again.fingerprint == recipe.fingerprint and again.filters == recipe.filters


def test_share_page_offers_the_recipe_and_the_text():
    at = _open("views/share.py")
    assert not _errors(at)
    assert any("Median time to failure" in c.value for c in at.code)


def test_entry_time_role_is_honoured_by_the_curves_page():
    """Delayed entry: choosing an entry column on Column roles changes the curves the way the
    engine says (and differs from ignoring it)."""
    from engine.survival.summary import group_summary

    rng = np.random.default_rng(20261202)
    n = 400
    entry = rng.uniform(0, 6, n).round(2)
    time = (entry + 0.01 + rng.exponential(12, n)).round(2)  # entry < time on every row
    frame = pd.DataFrame(
        {"entered": entry, "followed": time, "status": rng.integers(0, 2, n), "arm": "A"}
    )
    content = frame.to_csv(index=False).encode("utf-8")
    at = AppTest.from_file(ENTRY, default_timeout=TIMEOUT).run()
    fresh: dict = {}
    data.open_upload(fresh, content, "late.csv")
    for key, value in fresh.items():
        at.session_state[key] = value
    at.switch_page("views/column_roles.py").run()
    at.selectbox(key="roles_time").set_value("followed").run()
    at.selectbox(key="roles_event").set_value("status").run()
    at.selectbox(key="roles_entry").set_value("entered").run()
    assert not at.exception, [e.message for e in at.exception]
    roles = at.session_state[state.ROLES]
    assert roles.entry == "entered"
    at.switch_page("views/curves.py").run()
    assert not at.exception
    at.text_input(key="curves_times").set_value("10").run()
    # the event column "status" names no event: the words say "the event"
    shown = at.dataframe[0].value["Probability still free of the event at 10 days"].iloc[0]
    table = read_table(content, name="late.csv")
    with_entry = group_summary(prepare(table.frame, roles).frame, (10.0,)).to_frame()
    without = group_summary(
        prepare(table.frame, replace(roles, entry=None)).frame, (10.0,)
    ).to_frame()
    assert shown.startswith(f"{with_entry['survival_10'].iloc[0]:.3f}")
    assert f"{with_entry['survival_10'].iloc[0]:.3f}" != f"{without['survival_10'].iloc[0]:.3f}"


def test_restored_ties_and_ph_scale_show_on_the_regression_page():
    at, session = _share_page_with_pumps(
        {"model_ties": "Breslow", "model_ph_time_scale": "Rank of the event times"}
    )
    recipe = share_section.recipe_from_session(session)
    assert recipe.settings()["cox"] == {
        "ties": "breslow",
        "confidence": 0.95,
        "ph_time_scale": "rank",
        "covariates": None,
        "strata": None,
        "reference": None,
        "variance": "auto",
        "splines": [],
        "split": None,
    }
    share_section.restore_recipe(at.session_state, recipe)
    at.switch_page("views/regression.py").run()
    assert not at.exception, [e.message for e in at.exception]
    assert at.radio(key="model_ties").value == "Breslow"
    assert at.session_state["model_ph_time_scale"] == "Rank of the event times"
    run = run_analysis(prepare(session[state.TABLE].frame, session[state.ROLES]), recipe.settings())
    assert run["cox"]["ties"] == "breslow"


def test_curves_manuscript_text_follows_the_unit_switch():
    at = _open("views/curves.py")
    at.selectbox(key="curves_unit").set_value("years").run()
    assert not at.exception
    text = next(c.value for c in at.code if "Median time to failure" in c.value)
    assert " years (95% CI" in text and "months" not in text


PAGE_CHOICES = {
    "compare_source": share_section.CUT_SOURCE,
    "compare_cut_column": "temperature_C",
    "compare_cut_k": 3,
    "compare_strata": "site",
    "model_covariates": ["load_kN", "lubricant"],
    "model_strata": "site",
    share_section.REFERENCE_PREFIX + "lubricant": "oil bath",
}


def test_restored_cut_strata_and_model_choices_give_the_pages_the_cli_numbers(tmp_path):
    """A recipe made with a cut, strata and a covariate subset: the command line's replay and
    the restored Group comparison and Regression pages show the same numbers."""
    import json
    import subprocess
    import sys

    at, session = _share_page_with_pumps(PAGE_CHOICES)
    recipe = share_section.recipe_from_session(session)
    settings = recipe.settings()
    assert settings["comparison"]["cut"] == {"column": "temperature_C", "groups": 3}
    assert settings["comparison"]["strata"] == "site"
    assert settings["cox"]["covariates"] == ["load_kN", "lubricant"]
    assert settings["cox"]["strata"] == "site"
    assert settings["cox"]["reference"] == [["lubricant", "oil bath"]]
    path = tmp_path / "r.json"
    path.write_text(recipe.to_json(), encoding="utf-8")
    done = subprocess.run(
        [sys.executable, "-m", "app", "analyze", str(DEMO / "pump_bearings.csv"), "--recipe",
         str(path), "--json", "-"],
        cwd=ROOT, capture_output=True, text=True, timeout=300,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    cli = json.loads(done.stdout)

    assert share_section.restore_recipe(at.session_state, Recipe.from_json(path.read_text())) == []
    at.switch_page("views/comparison.py").run()
    assert not at.exception, [e.message for e in at.exception]
    assert at.radio(key="compare_source").value == share_section.CUT_SOURCE
    assert at.selectbox(key="compare_strata").value == "site"
    comparison = cli["comparison"]
    assert comparison["df"] == 2
    assert _metric(at, "Chi-squared (χ²)") == format_number(comparison["statistic"], 2)
    assert _metric(at, "Degrees of freedom") == str(comparison["df"])
    assert _metric(at, "p-value") == ui.fmt_p(comparison["p_value"])

    at.switch_page("views/regression.py").run()
    assert not at.exception, [e.message for e in at.exception]
    assert at.multiselect(key="model_covariates").value == ["load_kN", "lubricant"]
    assert at.selectbox(key="model_strata").value == "site"
    cox = cli["cox"]
    assert _metric(at, "Rows used") == f"{cox['n']:,}"
    assert _metric(at, "Events") == f"{cox['events']:,}"
    shown = next(d.value for d in at.dataframe if "Hazard ratio" in d.value.columns)
    expected = [
        f"{t['variable']}: {t['level']} vs {t['reference']}" if t["level"] else t["variable"]
        for t in cox["terms"]
    ]
    assert list(shown["Term"]) == expected
    assert list(shown["Hazard ratio"]) == [format_ratio(t["hazard_ratio"]) for t in cox["terms"]]
    coefficients = shown["Coefficient (log hazard ratio)"]
    assert list(coefficients) == [format_nonzero(t["coef"], 3) for t in cox["terms"]]
    assert all(t["reference"] == "oil bath" for t in cox["terms"] if t["level"] is not None)

    # the recipe downloaded again from the restored pages is the one restored
    again = share_section.recipe_from_session(at.session_state)
    assert again.analyses == recipe.analyses
