"""Recipe replay and report writing as the command line uses them (no streamlit)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from app.batch import (
    OutputError,
    forest_rows,
    load_recipe_run,
    read_recipe,
    report_from_json_and_results,
    write_text,
)
from engine.analysis.recipe import RecipeError, make_recipe
from engine.io.tables import ImportOptions, read_table
from engine.prepare.checks import prepare
from engine.prepare.filters import RowFilter
from engine.prepare.roles import Roles
from engine.survival.summary import comparison_json, curves_json

ROOT = Path(__file__).resolve().parents[2]
JOINT_TRIAL = ROOT / "demo_data" / "joint_trial.csv"
ROLES = Roles(
    start="enrolled",
    end="last_visit",
    day_first=True,
    unit="months",
    event="outcome",
    event_values=("relapsed",),
    group="arm",
)
SETTINGS = {
    "curves": {"times": [6, 12], "ci_transform": "log", "confidence": 0.9},
    "comparison": {"test": "tarone-ware"},
}


def _results(prepared, settings) -> dict:
    """The JSON sections as the command line computes them (curves and comparison)."""
    curves = settings["curves"]
    return {
        "schema": 1,
        "data": prepared.report.to_dict(),
        "curves": curves_json(
            prepared.frame, curves["times"], curves["confidence"], curves["ci_transform"]
        ),
        "comparison": comparison_json(prepared.frame, settings["comparison"]["test"]),
    }


@pytest.fixture
def recipe_file(tmp_path):
    """What the app saves: the table as read, its roles, a filter and the chosen settings."""
    table = read_table(JOINT_TRIAL, ImportOptions(sep=","))
    recipe = make_recipe(
        table, ROLES, SETTINGS, filters=[RowFilter("clinic", "in", ("Riverside", "Hilltop"))]
    )
    path = tmp_path / "analysis.hazel.json"
    path.write_text(recipe.to_json(), encoding="utf-8")
    return path


def test_replayed_recipe_gives_the_same_numbers_as_the_app(recipe_file):
    # the app's side: the same table, roles, filter and settings, computed directly
    table = read_table(JOINT_TRIAL)
    kept = table.frame[table.frame["clinic"].isin(["Riverside", "Hilltop"])]
    app_results = _results(prepare(kept.reset_index(drop=True), ROLES), SETTINGS)

    imported, prepared, settings, warnings = load_recipe_run(recipe_file, JOINT_TRIAL)
    assert imported.source_name == "joint_trial.csv"
    assert warnings == []
    assert settings["curves"]["ci_transform"] == "log"
    assert settings["comparison"]["test"] == "tarone-ware"
    cli_results = _results(prepared, settings)
    assert json.dumps(cli_results, sort_keys=True) == json.dumps(app_results, sort_keys=True)
    assert cli_results["comparison"]["test"] == "Tarone–Ware"
    assert prepared.report.time_unit == "months"


def test_replay_on_a_changed_file_warns_and_still_runs(recipe_file, tmp_path):
    lines = JOINT_TRIAL.read_text(encoding="utf-8").splitlines()
    changed = tmp_path / "joint_trial_update.csv"
    changed.write_text("\n".join(lines[:-20]) + "\n", encoding="utf-8")
    run = load_recipe_run(recipe_file, changed)
    assert len(run.warnings) == 2
    assert run.warnings[0].startswith("The data file is not the one the recipe was made with")
    assert run.warnings[1] == "The recipe was made on 420 rows; this file has 400 rows."
    assert run.filtered.to_dict()["rows_kept"] == run.prepared.report.rows_read


def test_report_of_a_replayed_recipe(recipe_file):
    run = load_recipe_run(recipe_file, JOINT_TRIAL)
    results = _results(run.prepared, run.settings)
    text = report_from_json_and_results(
        results,
        run.settings,
        imported=run.imported,
        prepared=run.prepared,
        filtered=run.filtered,
        warnings=["a replay warning"],
    )
    assert text.count("<svg") == 1  # the Kaplan–Meier figure with its numbers at risk
    assert "Subjects still at risk" in text
    assert "https://" not in text and "http://" not in text
    assert "clinic is one of &#x27;Riverside&#x27;, &#x27;Hilltop&#x27;" in text
    assert "a replay warning" in text
    assert "90% confidence intervals" in text and "the log transform" in text
    assert "Tarone–Ware" in text


def test_recipe_file_errors_name_the_file(tmp_path):
    with pytest.raises(RecipeError, match="cannot read the recipe"):
        read_recipe(tmp_path / "missing.json")
    bad = tmp_path / "bad.json"
    bad.write_text('{"schema": 1}', encoding="utf-8")
    with pytest.raises(RecipeError, match=r"bad\.json: This file is not a Hazel recipe"):
        read_recipe(bad)


def test_settings_from_command_line_options():
    from app.cli import build_parser, settings_from_args

    args = build_parser().parse_args(
        ["analyze", "x.csv", "--times", "6, 12.5", "--ci-transform", "linear", "--test",
         "peto-peto"]
    )  # fmt: skip
    settings = settings_from_args(args)
    assert settings["curves"]["times"] == [6.0, 12.5]
    assert settings["curves"]["ci_transform"] == "linear"
    assert settings["comparison"]["test"] == "peto-peto"
    assert settings["cox"] == {
        "ties": "efron",
        "confidence": 0.95,
        "ph_time_scale": "survival",
        "covariates": None,
        "strata": None,
        "reference": None,
        "variance": "auto",
        "splines": [],
        "split": None,
    }
    assert set(settings) == {"curves", "comparison", "cox"}
    # a recipe's settings are the base; options given override them
    base = {"curves": {"confidence": 0.9, "times": [3.0]}, "landmark": {"time": 2.0}}
    settings = settings_from_args(args, base=base)
    assert settings["curves"]["confidence"] == 0.9 and settings["curves"]["times"] == [6.0, 12.5]
    assert settings["landmark"] == {"time": 2.0, "test": "peto-peto", "rho": 0.0, "gamma": 0.0}


def test_forest_rows_add_a_reference_row_per_categorical():
    cox = {
        "terms": [
            {"variable": "arm", "level": "B", "reference": "A", "hazard_ratio": 0.5,
             "lower": 0.3, "upper": 0.8, "p_value": 0.004},
            {"variable": "arm", "level": "C", "reference": "A", "hazard_ratio": 0.9,
             "lower": 0.6, "upper": 1.3, "p_value": 0.6},
            {"variable": "age", "level": None, "reference": None, "hazard_ratio": 1.02,
             "lower": 1.0, "upper": 1.04, "p_value": 0.0004},
        ]
    }  # fmt: skip
    rows = forest_rows(cox)
    assert rows["label"].tolist() == ["arm: A (reference)", "arm: B vs A", "arm: C vs A", "age"]
    assert rows["is_reference"].tolist() == [True, False, False, False]
    assert rows["p_text"].tolist() == ["", "0.004", "0.600", "< 0.001"]


def test_unwritable_output_is_a_clear_error(tmp_path):
    with pytest.raises(OutputError, match="cannot write"):
        write_text(tmp_path / "no" / "such" / "dir" / "r.html", "x")
