"""The Gray's test, Fine–Gray and prediction-performance settings of a recipe are checked against
engine/analysis/recipe.schema.json: a bad value is refused with the field's path."""

from __future__ import annotations

import json

import pytest

from engine.analysis.recipe import Recipe, RecipeError
from engine.analysis.run import ANALYSIS_DEFAULTS

MINIMAL = {
    "hazel_recipe": 1,
    "data": {"sha256": "ab" * 32, "rows": 3, "columns": ["t", "e"]},
    "roles": {"time": "t", "event": "e"},
    "analyses": {"curves": {}},
}


def _with(section: str, setting: str, value) -> dict:
    data = json.loads(json.dumps(MINIMAL))
    data["analyses"][section] = {setting: value}
    return data


@pytest.mark.parametrize(
    ("section", "setting", "value", "message"),
    [
        ("competing", "gray_test", "yes", r"^analyses\.competing\.gray_test must be true/false"),
        ("competing", "fine_gray", 3, r"^analyses\.competing\.fine_gray must be null or text"),
        ("performance", "times", "12", r"^analyses\.performance\.times must be a list"),
        ("performance", "times", [6, "x"], r"^analyses\.performance\.times\[1\] must be a number"),
        ("performance", "tau", -1, r"^analyses\.performance\.tau must be a number .* got -1"),
        ("performance", "calibration_time", "t", r"^analyses\.performance\.calibration_time"),
        ("performance", "risk_groups", 1, r"^analyses\.performance\.risk_groups must be a whole"),
        ("performance", "risk_groups", 2.5, r"risk_groups must be a whole number between 2"),
        ("performance", "replicates", 10**6, r"^analyses\.performance\.replicates must be"),
        ("performance", "seed", -3, r"^analyses\.performance\.seed must be a whole number"),
        ("performance", "bootstrap", 10, r"performance\.bootstrap is not a setting Hazel knows"),
    ],
)
def test_a_bad_setting_is_named_by_its_path(section, setting, value, message):
    with pytest.raises(RecipeError, match=message):
        Recipe.from_dict(_with(section, setting, value))


@pytest.mark.parametrize("section", ["competing", "performance"])
def test_the_defaults_pass(section):
    recipe = Recipe.from_dict(
        {**MINIMAL, "analyses": {"curves": {}, section: ANALYSIS_DEFAULTS[section]}}
    )
    assert recipe.settings()[section] == ANALYSIS_DEFAULTS[section]
