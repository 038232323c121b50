"""Recipes: round trip, versions and migration, fingerprint differences, damaged files."""

from __future__ import annotations

import hashlib
import json

import pandas as pd
import pytest

from engine.analysis.recipe import (
    CURRENT_VERSION,
    VERSION_KEY,
    DataFingerprint,
    Recipe,
    RecipeError,
    check_fingerprint,
    make_recipe,
    migrate,
    software_versions,
)
from engine.io.tables import read_table
from engine.prepare.filters import RowFilter

CSV = b"id,weeks,relapse,arm\nZX-101,6.25,1,A\nZX-102,7,0,B\nZX-103,10,1,A\nZX-104,13.75,1,B\n"


@pytest.fixture
def imported():
    return read_table(CSV, name="trial.csv")


def _recipe(imported) -> Recipe:
    return make_recipe(
        imported,
        roles={"time": "weeks", "event": "relapse", "event_values": ["1"], "group": "arm"},
        analyses={
            "curves": {"times": [6, 12], "ci_transform": "log", "confidence": 0.9},
            "comparison": {"test": "tarone-ware"},
        },
        filters=[RowFilter("arm", "in", ("A", "B"))],
        note="first look",
    )


def test_fingerprint_holds_the_file_hash_rows_and_columns_but_no_data(imported):
    recipe = _recipe(imported)
    assert recipe.fingerprint == DataFingerprint(
        sha256=hashlib.sha256(CSV).hexdigest(),
        rows=4,
        columns=("id", "weeks", "relapse", "arm"),
        file_name="trial.csv",
    )
    text = recipe.to_json()
    for cell in ("ZX-101", "ZX-104", "6.25", "13.75"):  # ids and times of the data
        assert cell not in text


def test_round_trip_through_json_is_exact(imported):
    recipe = _recipe(imported)
    again = Recipe.from_json(recipe.to_json())
    assert again == recipe
    assert again.to_dict() == recipe.to_dict()
    assert json.loads(recipe.to_json())[VERSION_KEY] == CURRENT_VERSION
    assert Recipe.from_json(recipe.to_json().encode("utf-8")) == recipe


def test_recipe_does_not_share_state_with_its_caller(imported):
    analyses = {"curves": {"times": [6]}}
    recipe = make_recipe(imported, roles={"time": "weeks"}, analyses=analyses)
    analyses["curves"]["times"].append(99)
    recipe.to_dict()["analyses"]["curves"]["times"].append(42)
    assert recipe.analyses == {"curves": {"times": [6]}}


def test_settings_fill_defaults_for_what_the_recipe_omits(imported):
    settings = _recipe(imported).settings()
    assert settings["curves"] == {
        "times": [6, 12],
        "ci_transform": "log",
        "confidence": 0.9,
        "rmst_horizon": None,
        "rmst_origin": "zero",
    }
    assert settings["comparison"]["test"] == "tarone-ware"
    assert "cox" not in settings  # only the analyses chosen are run


def test_software_versions_are_recorded():
    versions = software_versions()
    assert set(versions) == {"python", "numpy", "pandas", "scipy", "lifelines"}
    assert versions["pandas"] == pd.__version__


def test_same_file_has_no_fingerprint_differences(imported):
    assert check_fingerprint(_recipe(imported), read_table(CSV, name="copy.csv")) == []


def test_changed_file_gives_one_warning_per_difference(imported):
    recipe = _recipe(imported)
    changed = read_table(
        b"id,weeks,relapse,site\n1,6,1,X\n2,7,0,Y\n3,10,1,X\n", name="trial-v2.csv"
    )
    warnings = check_fingerprint(recipe, changed)
    assert len(warnings) == 4
    assert warnings[0].startswith("The data file is not the one the recipe was made with")
    assert "(trial.csv)" in warnings[0]
    assert warnings[1] == "The recipe was made on 4 rows; this file has 3 rows."
    assert warnings[2] == "Columns in the recipe's data but not in this file: 'arm'."
    assert warnings[3] == "Columns in this file but not in the recipe's data: 'site'."


def test_reordered_columns_are_reported(imported):
    reordered = read_table(b"weeks,id,relapse,arm\n6,1,1,A\n7,2,0,B\n10,3,1,A\n13,4,1,B\n")
    assert len(reordered.frame) == len(imported.frame)
    warnings = check_fingerprint(_recipe(imported), reordered)
    assert warnings[-1] == "The columns are the same but in a different order."
    assert len(warnings) == 2  # the hash differs too; the row count does not


def test_newer_version_is_refused_with_a_clear_message(imported):
    data = _recipe(imported).to_dict()
    data[VERSION_KEY] = CURRENT_VERSION + 1
    newer = rf"newer Hazel \(recipe version {CURRENT_VERSION + 1}\).*Update Hazel"
    with pytest.raises(RecipeError, match=newer):
        Recipe.from_dict(data)


@pytest.mark.parametrize(
    ("payload", "message"),
    [
        ("{not json", "not valid JSON"),
        ("[1, 2]", "no 'hazel_recipe' version key"),
        ('{"schema": 1, "data": {}}', "no 'hazel_recipe' version key"),
        ('{"hazel_recipe": "1"}', "must be a whole number"),
        ('{"hazel_recipe": true}', "must be a whole number"),
        ('{"hazel_recipe": -1}', "not one Hazel has ever written"),
        ('{"hazel_recipe": 1, "roles": {}}', "lacks 'data', 'analyses'"),
        (
            '{"hazel_recipe": 1, "data": {"sha256": "x", "rows": 1, "columns": []},'
            ' "roles": {}, "analyses": {}, "filters": [{"column": "a", "rule": "near"}]}',
            r'filters\[0\]\.rule must be "in", .* or "not_missing"; got "near"',
        ),
    ],
)
def test_damaged_or_foreign_files_give_a_clear_error(payload, message):
    with pytest.raises(RecipeError, match=message):
        Recipe.from_json(payload)


def test_a_data_file_chosen_by_mistake_is_refused_by_size():
    with pytest.raises(RecipeError, match="Did you choose the data file by mistake"):
        Recipe.from_json(b"a,b\n" + b"1,2\n" * 300_000)


VERSION_0 = {
    "hazel_recipe": 0,
    "file": {"name": "trial.csv", "hash": "ab" * 32, "n_rows": 42, "columns": ["t", "e", "g", "x"]},
    "import": {"sep": ";", "decimal": ","},
    "roles": {"time": "t", "event": "e", "group": "g", "covariates": ["x"]},
    "settings": {"times": [12], "confidence": 0.9, "test": "peto-peto", "ties": "breslow"},
}


def test_version_0_is_migrated_to_the_current_layout():
    recipe = Recipe.from_dict(VERSION_0)
    assert recipe.fingerprint == DataFingerprint("ab" * 32, 42, ("t", "e", "g", "x"), "trial.csv")
    assert recipe.import_options == {"sep": ";", "decimal": ","}
    assert recipe.roles == VERSION_0["roles"]
    assert recipe.filters == ()
    assert recipe.analyses == {
        "curves": {"times": [12], "confidence": 0.9},
        "comparison": {"test": "peto-peto"},
        "cox": {"ties": "breslow"},
    }
    # a migrated recipe saves in the current layout and reads back unchanged
    assert Recipe.from_json(recipe.to_json()) == recipe
    assert VERSION_0["hazel_recipe"] == 0  # the caller's object is not modified


def test_version_0_without_group_or_covariates_runs_curves_only():
    old = {**VERSION_0, "roles": {"time": "t", "event": "e"}, "settings": {}}
    assert migrate(old)["analyses"] == {"curves": {}}


def test_version_0_with_an_unknown_setting_is_refused():
    old = {**VERSION_0, "settings": {"colour": "red"}}
    with pytest.raises(RecipeError, match="setting 'colour'"):
        migrate(old)


def test_version_1_setting_names_are_migrated_to_version_2(imported):
    # Version 1 used the names of the proportional-hazards transform and of the parametric
    # families that version 2 replaced with its own words; replaying must give the new ones.
    old = _recipe(imported).to_dict()
    old[VERSION_KEY] = 1
    old["roles"] = {**old["roles"], "dayfirst": True}
    old["roles"].pop("day_first", None)
    old["analyses"] = {
        "curves": {},
        "cox": {"ties": "efron", "ph_transform": "km"},
        "parametric": {
            "distributions": ["exponential", "weibull", "lognormal", "loglogistic"],
            "aft_distribution": "loglogistic",
        },
    }
    recipe = Recipe.from_dict(old)
    settings = recipe.settings()
    assert settings["cox"]["ph_time_scale"] == "survival"
    assert "ph_transform" not in settings["cox"]
    assert settings["parametric"]["distributions"] == [
        "exponential",
        "weibull",
        "log-normal",
        "log-logistic",
    ]
    assert settings["parametric"]["aft_distribution"] == "log-logistic"
    assert recipe.roles["day_first"] is True and "dayfirst" not in recipe.roles
    assert recipe.to_dict()[VERSION_KEY] == CURRENT_VERSION == 2


@pytest.mark.parametrize(
    ("old", "new"),
    [("km", "survival"), ("rank", "rank"), ("identity", "time"), ("log", "log-time")],
)
def test_each_old_time_scale_maps_to_its_new_name(imported, old, new):
    data = _recipe(imported).to_dict()
    data[VERSION_KEY] = 1
    data["analyses"] = {"curves": {}, "cox": {"ph_transform": old}}
    assert Recipe.from_dict(data).settings()["cox"]["ph_time_scale"] == new


def test_version_0_ph_transform_reaches_version_2(imported):
    data = {
        VERSION_KEY: 0,
        "file": {"name": "x.csv", "hash": "0" * 64, "n_rows": 3, "columns": ["a"]},
        "import": {},
        "roles": {"time": "a", "covariates": ["a"]},
        "settings": {"ph_transform": "identity", "ties": "breslow"},
    }
    settings = Recipe.from_dict(data).settings()
    assert settings["cox"]["ph_time_scale"] == "time" and settings["cox"]["ties"] == "breslow"
