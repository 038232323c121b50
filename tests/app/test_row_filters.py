"""The Row filters page: rules of engine.prepare.filters built on the page, rows kept and removed
shown
live, every page and the recipe using the subset, and a filter that would remove every row
refused with a message."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

from app import row_filters, share_section, state
from app.batch import apply_recipe
from engine.analysis.run import run_analysis
from engine.errors import HazelError
from engine.io.tables import read_table
from engine.prepare.filters import RowFilter

ROOT = Path(__file__).resolve().parents[2]
ENTRY = str(ROOT / "app" / "hazel.py")
PUMPS = read_table(ROOT / "demo_data" / "pump_bearings.csv").frame


def _filters_page() -> AppTest:
    at = AppTest.from_file(ENTRY, default_timeout=120).run()
    at.switch_page("views/row_filters.py").run()
    assert not at.exception, [e.message for e in at.exception]
    return at


def _texts(at: AppTest) -> str:
    return "\n".join([m.value for m in at.markdown] + [c.value for c in at.caption])


def _metric(at: AppTest, label: str) -> str:
    return next(m.value for m in at.metric if m.label == label)


def test_a_value_filter_shows_its_count_live_and_every_page_uses_it():
    at = _filters_page()
    assert _metric(at, "Rows kept") == "1,500"
    at.selectbox(key="filter_column").set_value("supplier").run()
    at.selectbox(key="filter_rule").set_value("in").run()
    at.multiselect(key="filter_values_supplier").set_value(["Ashford", "Northwind"]).run()
    expected = int(PUMPS["supplier"].isin(["Ashford", "Northwind"]).sum())
    assert f"would keep **{expected:,}** rows and remove **{1500 - expected:,}**" in _texts(at)
    at.button(key="filter_add_button").click().run()
    assert not at.exception
    assert _metric(at, "Rows kept") == f"{expected:,}"
    in_use = at.session_state[state.TABLE]
    assert len(in_use.frame) == expected
    assert set(in_use.frame["supplier"]) == {"Ashford", "Northwind"}
    # the sidebar, the Curves page and the recipe use the subset
    assert f"of {expected:,}" in "\n".join(m.value for m in at.sidebar.markdown)
    at.switch_page("views/curves.py").run()
    assert not at.exception and not at.error
    recipe = share_section.recipe_from_session(at.session_state)
    assert [f.to_dict() for f in recipe.filters] == [
        {"column": "supplier", "rule": "in", "values": ["Ashford", "Northwind"]}
    ]
    assert recipe.fingerprint.rows == 1500  # the fingerprint is the file's, not the subset's
    # the report's path (recipe replay) sees the same rows
    run = apply_recipe(recipe, share_section.source_table(at.session_state))
    assert run.prepared.report.rows_read == expected
    sections = run_analysis(run.prepared, run.settings, run.source)
    assert sections["data"]["rows_read"] == expected


def test_number_limits_count_as_pandas_does_and_filters_chain():
    at = _filters_page()
    at.selectbox(key="filter_column").set_value("load_kN").run()
    at.selectbox(key="filter_rule").set_value("at_least").run()
    at.number_input(key="filter_low_load_kN").set_value(15.0).run()
    at.button(key="filter_add_button").click().run()
    at.selectbox(key="filter_column").set_value("temperature_C").run()
    at.selectbox(key="filter_rule").set_value("between").run()
    at.number_input(key="filter_low_temperature_C").set_value(50.0).run()
    at.number_input(key="filter_high_temperature_C").set_value(60.0).run()
    first = PUMPS["load_kN"] >= 15
    both = first & PUMPS["temperature_C"].between(50, 60)
    assert f"would keep **{int(both.sum()):,}** rows" in _texts(at)
    at.button(key="filter_add_button").click().run()
    assert not at.exception
    assert _metric(at, "Rows kept") == f"{int(both.sum()):,}"
    text = _texts(at)
    assert f"removes {int((~first).sum()):,}" in text
    assert f"removes {int((first & ~both).sum()):,}" in text
    # remove the first filter: only the temperature filter is left
    at.button(key="filter_remove_0_button").click().run()
    assert not at.exception
    left = PUMPS["temperature_C"].between(50, 60)
    assert _metric(at, "Rows kept") == f"{int(left.sum()):,}"
    at.button(key="filter_clear_button").click().run()
    assert _metric(at, "Rows kept") == "1,500"
    assert state.TABLE in at.session_state and len(at.session_state[state.TABLE].frame) == 1500


def test_a_filter_removing_every_row_is_a_message_not_a_crash():
    at = _filters_page()
    at.selectbox(key="filter_column").set_value("load_kN").run()
    at.selectbox(key="filter_rule").set_value("at_least").run()
    at.number_input(key="filter_low_load_kN").set_value(1e6).run()
    assert not at.exception
    assert any("remove every remaining row" in w.value for w in at.warning)
    at.button(key="filter_add_button").click().run()
    assert not at.exception
    assert any("would remove every row" in e.value for e in at.error)
    assert len(at.session_state[state.TABLE].frame) == 1500  # nothing changed
    for page in ("views/curves.py", "views/regression.py", "views/share.py"):
        at.switch_page(page).run()
        assert not at.exception


def test_set_filters_refuses_an_empty_subset_and_keeps_the_table():
    table = read_table(ROOT / "demo_data" / "pump_bearings.csv")
    session = {state.TABLE: table}
    with pytest.raises(HazelError, match="would remove every row"):
        row_filters.set_filters(session, [RowFilter("load_kN", "at_most", (-1.0,))])
    assert session[state.TABLE] is table and share_section.FILTERS not in session
    row_filters.set_filters(session, [RowFilter("site", "not_in", ("harbour",))])
    assert len(session[state.TABLE].frame) == int((PUMPS["site"] != "harbour").sum())
    assert share_section.source_table(session) is table
    row_filters.set_filters(session, [])
    assert session[state.TABLE] is table


def test_rules_offered_fit_the_column():
    assert row_filters.rules_for(pd.Series([1.0, 2.0])) == [
        "in",
        "not_in",
        "between",
        "at_least",
        "at_most",
        "not_missing",
    ]
    assert row_filters.rules_for(pd.Series(["a", "b"])) == ["in", "not_in", "not_missing"]
    assert row_filters.listed_values(pd.Series(["b", "a", "b", None])) == ["b", "a"]


def test_a_new_file_forgets_the_filters():
    at = _filters_page()
    at.selectbox(key="filter_column").set_value("site").run()
    at.selectbox(key="filter_rule").set_value("not_missing").run()
    at.button(key="filter_add_button").click().run()
    assert at.session_state[share_section.FILTERS]
    at.session_state[state.PENDING_UPLOAD] = ("mine.csv", b"t,e\n1,1\n2,0\n3,1\n")
    at.switch_page("views/data_import.py").run()
    assert not at.exception
    assert share_section.FILTERS not in at.session_state
    assert len(at.session_state[state.TABLE].frame) == 3
