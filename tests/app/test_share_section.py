"""The share section: session state to recipe and back, and the section drawn in AppTest."""

from __future__ import annotations

from dataclasses import replace

import pytest
from streamlit.testing.v1 import AppTest

from app import state
from app.share_section import (
    FILTERS,
    recipe_from_session,
    restore_recipe,
    settings_from_session,
)
from engine.analysis.recipe import Recipe
from engine.errors import HazelError
from engine.io.tables import read_table
from engine.prepare.filters import RowFilter
from engine.prepare.roles import Roles
from tests.app.demo_files import PUMP_ROLES, PUMPS

ROLES = replace(PUMP_ROLES, reference=(("lubricant", "grease"),))


@pytest.fixture(scope="module")
def table():
    return read_table(PUMPS)


def _session(table) -> dict:
    return {
        state.TABLE: table,
        state.ROLES: ROLES,
        "curves_conf": "90%",
        "curves_transform": "log-log (default)",
        "curves_times": "12, 24; 36",
        "curves_tau": 0.0,
        "compare_test": "fleming-harrington",
        "compare_rho": 0.0,
        "compare_gamma": 1.0,
        "roles_time": "months_in_service",
        FILTERS: (RowFilter("site", "not_in", ("harbour",)),),
    }


def test_settings_are_read_from_the_page_widgets(table):
    settings = settings_from_session(_session(table), ROLES)
    assert settings == {
        "curves": {
            "times": [12.0, 24.0, 36.0],
            "ci_transform": "log-log",
            "confidence": 0.9,
            "rmst_horizon": None,
            "rmst_origin": "zero",
        },
        "comparison": {
            "test": "fleming-harrington",
            "rho": 0.0,
            "gamma": 1.0,
            "cut": None,
            "strata": None,
        },
        "cox": {
            "ties": "efron",
            "confidence": 0.95,
            "ph_time_scale": "survival",
            "covariates": None,
            "strata": None,
            "reference": None,
            "variance": "auto",
            "splines": [],
            "split": None,
        },
    }


def test_session_to_recipe_to_session_restores_everything(table):
    recipe = recipe_from_session(_session(table))
    assert recipe.roles == ROLES.to_dict()
    fresh = {state.TABLE: read_table(PUMPS), state.ROLES: Roles(), "roles_time": "other"}
    warnings = restore_recipe(fresh, Recipe.from_json(recipe.to_json()))
    assert warnings == []
    assert fresh[state.ROLES] == ROLES
    assert "roles_time" not in fresh  # the roles page refills its widgets from the new roles
    assert fresh["curves_conf"] == "90%"
    assert fresh["curves_transform"] == "log-log (default)"
    assert fresh["curves_times"] == "12, 24, 36"
    assert fresh["compare_test"] == "fleming-harrington"
    assert fresh[FILTERS] == (RowFilter("site", "not_in", ("harbour",)),)
    again = recipe_from_session(fresh)
    assert again.to_dict() == recipe.to_dict()


def test_restore_on_another_file_warns(table, tmp_path):
    lines = PUMPS.read_text(encoding="utf-8").splitlines()
    smaller = tmp_path / "pumps_part.csv"
    smaller.write_text("\n".join(lines[:1001]) + "\n", encoding="utf-8")
    recipe = recipe_from_session(_session(table))
    session = {state.TABLE: read_table(smaller)}
    warnings = restore_recipe(session, recipe)
    assert "The recipe was made on 1,500 rows; this file has 1,000 rows." in warnings
    assert session[state.ROLES] == ROLES


def test_restore_needs_the_table_and_its_columns(table):
    recipe = recipe_from_session(_session(table))
    with pytest.raises(HazelError, match="Open the data file first"):
        restore_recipe({}, recipe)
    other = read_table(b"a,b\n1,0\n2,1\n", name="other.csv")
    with pytest.raises(HazelError, match="'months_in_service'"):
        restore_recipe({state.TABLE: other}, recipe)


def _section_script():
    import streamlit as st

    from app import data, state
    from app.share_section import render_share_section
    from engine.prepare.roles import Roles
    from engine.survival.summary import comparison_json, curves_json

    if state.TABLE not in st.session_state:
        data.open_demo(st.session_state, data.DEMO_DIR / "pump_bearings.csv")
        st.session_state[state.ROLES] = Roles(
            time="months_in_service", unit="months", event="failed", group="supplier"
        )

    def run_analysis(imported, prepared, settings, source=None):
        return {
            "schema": 1,
            "data": prepared.report.to_dict(),
            "curves": curves_json(prepared.frame, settings["curves"]["times"]),
            "comparison": comparison_json(prepared.frame),
        }

    render_share_section(run_analysis=run_analysis)


def test_section_offers_the_recipe_and_builds_the_report():
    at = AppTest.from_function(_section_script, default_timeout=60).run()
    assert not at.exception
    assert at.subheader[0].value == "Share and replay"
    assert [b.label for b in at.button] == ["Build the report"]
    at.button(key="share_report_button").click().run()
    assert not at.exception
    built = at.session_state["share_report_html"][1]
    assert built.startswith("<!DOCTYPE html>") and "<svg" in built
    assert "https://" not in built


def test_optional_analyses_follow_their_page_switches(table):
    session = {
        **_session(table),
        "cr_include": True,
        "cr_times": "52",
        "param_include": False,
        "param_times": "12",
        "power_include": True,
        "power_hr": 0.6,
        "power_events": 0.0,
        "landmark_include": True,
        "landmark_time": 6.0,
        "landmark_test": "peto-peto",
    }
    settings = recipe_from_session(session).settings()
    assert "parametric" not in settings  # its switch is off
    assert settings["competing"]["times"] == [52.0]
    assert settings["sample_size"]["hazard_ratio"] == 0.6
    assert settings["sample_size"]["events"] is None  # 0 on the page: no power figure asked
    assert settings["landmark"] == {"time": 6.0, "test": "peto-peto", "rho": 0.0, "gamma": 0.0}
    fresh = {state.TABLE: read_table(PUMPS)}
    restore_recipe(fresh, recipe_from_session(session))
    assert fresh["cr_include"] and fresh["power_include"] and not fresh["param_include"]
    assert fresh["cr_times"] == "52" and fresh["landmark_test"] == "peto-peto"
    assert fresh["power_hr"] == 0.6 and fresh["landmark_time"] == 6.0


def test_page_choices_round_trip_through_the_recipe(table):
    """The comparison's cut and strata and the model's covariates, strata and reference levels
    go into the recipe only where they depart from the roles, and come back to the widgets."""
    from app.share_section import CUT_SOURCE, NO_COMPARE_STRATA, NO_MODEL_STRATA, ROLE_SOURCE

    roles = replace(ROLES, covariates=("load_kN", "temperature_C", "lubricant"), strata="site")
    session = {
        **_session(table),
        state.ROLES: roles,
        "compare_source": CUT_SOURCE,
        "compare_cut_column": "load_kN",
        "compare_cut_k": 4,
        "compare_strata": NO_COMPARE_STRATA,
        "model_covariates": ["lubricant", "load_kN"],
        "model_strata": "supplier",
        "model_reference_lubricant": "grease",  # the roles' reference: not written
    }
    settings = settings_from_session(session, roles)
    assert settings["comparison"]["cut"] == {"column": "load_kN", "groups": 4}
    assert settings["comparison"]["strata"] is False  # no strata although the roles have one
    assert settings["cox"]["covariates"] == ["lubricant", "load_kN"]
    assert settings["cox"]["strata"] == "supplier"
    assert settings["cox"]["reference"] is None
    session["model_reference_lubricant"] = "oil bath"
    recipe = recipe_from_session(session)
    assert recipe.settings()["cox"]["reference"] == [["lubricant", "oil bath"]]

    fresh = {state.TABLE: read_table(PUMPS), "compare_strata": "supplier", "model_strata": "x"}
    assert restore_recipe(fresh, Recipe.from_json(recipe.to_json())) == []
    assert fresh["compare_source"] == CUT_SOURCE
    assert (fresh["compare_cut_column"], fresh["compare_cut_k"]) == ("load_kN", 4)
    assert fresh["compare_strata"] == NO_COMPARE_STRATA
    assert fresh["model_covariates"] == ["lubricant", "load_kN"]
    assert fresh["model_strata"] == "supplier"
    assert fresh["model_reference_lubricant"] == "oil bath"
    assert recipe_from_session(fresh).to_dict() == recipe.to_dict()

    # the roles' own choices are written as null and leave the pages at their defaults
    plain = {
        **_session(table),
        state.ROLES: roles,
        "compare_source": ROLE_SOURCE,
        "compare_strata": "site",
        "model_covariates": list(roles.covariates),
        "model_strata": "site",
    }
    settings = settings_from_session(plain, roles)
    assert settings["comparison"]["cut"] is None and settings["comparison"]["strata"] is None
    assert settings["cox"]["covariates"] is None and settings["cox"]["strata"] is None
    fresh = {state.TABLE: read_table(PUMPS)}
    restore_recipe(fresh, recipe_from_session(plain))
    assert fresh["compare_source"] == ROLE_SOURCE
    assert "compare_strata" not in fresh and "model_strata" not in fresh
    assert "model_covariates" not in fresh
    assert NO_MODEL_STRATA not in fresh.values()


def test_a_recipe_without_the_page_choices_still_restores(table):
    """A recipe saved before these settings existed: the pages keep their defaults."""
    old = recipe_from_session(_session(table)).to_dict()
    for name, keys in (("comparison", ("cut", "strata")), ("cox", ("covariates", "strata"))):
        for key in keys:
            old["analyses"].get(name, {}).pop(key, None)
    old["analyses"]["cox"].pop("reference", None)
    recipe = Recipe.from_dict(old)
    assert "cut" not in recipe.analyses["comparison"]
    fresh = {state.TABLE: read_table(PUMPS), "compare_cut_column": "load_kN"}
    assert restore_recipe(fresh, recipe) == []
    assert fresh["compare_source"] == "The group column"
    assert "compare_cut_column" not in fresh and "model_covariates" not in fresh
    assert settings_from_session(fresh, ROLES) == settings_from_session(_session(table), ROLES)
