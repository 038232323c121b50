"""The Fine–Gray and prediction-performance settings go into the recipe from their page widgets
and come back to them."""

from __future__ import annotations

from app import state
from app.share_section import NO_FINE_GRAY, recipe_from_session, restore_recipe
from engine.analysis.recipe import Recipe
from engine.io.tables import read_table
from tests.app.demo_files import PUMP_ROLES, PUMPS


def _session() -> dict:
    return {
        state.TABLE: read_table(PUMPS),
        state.ROLES: PUMP_ROLES,
        "cr_include": True,
        "cr_fine_gray": "failed",
        "perf_include": True,
        "perf_times": "6, 12",
        "perf_tau": 0.0,
        "perf_calibration_time": "12",
        "perf_risk_groups": 4,
        "perf_replicates": 20,
        "perf_seed": 7,
    }


def test_settings_round_trip_through_the_recipe():
    recipe = recipe_from_session(_session())
    settings = recipe.settings()
    assert settings["competing"]["fine_gray"] == "failed"
    assert settings["performance"] == {
        "times": [6.0, 12.0],
        "tau": None,
        "calibration_time": 12.0,
        "risk_groups": 4,
        "replicates": 20,
        "seed": 7,
    }
    fresh = {state.TABLE: read_table(PUMPS)}
    assert restore_recipe(fresh, Recipe.from_json(recipe.to_json())) == []
    assert fresh["perf_include"] and fresh["perf_times"] == "6, 12"
    assert fresh["perf_calibration_time"] == "12" and fresh["perf_seed"] == 7
    assert fresh["cr_fine_gray"] == "failed"
    assert recipe_from_session(fresh).to_dict() == recipe.to_dict()


def test_no_fine_gray_model_is_none_in_the_recipe():
    session = {**_session(), "cr_fine_gray": NO_FINE_GRAY, "perf_include": False}
    settings = recipe_from_session(session).settings()
    assert settings["competing"]["fine_gray"] is None
    assert "performance" not in settings
