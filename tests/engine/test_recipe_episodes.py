"""Recipe settings of the robust variance, splines, follow-up split and subgroups: checked by the
recipe's JSON Schema, a bad value named by its field's path; a good recipe replays them."""

from __future__ import annotations

import json

import pytest

from engine.analysis.recipe import Recipe, RecipeError
from tests.engine.test_recipe_schema import _with

GOOD = {
    "cox": {
        "variance": "robust",
        "splines": [{"variable": "age", "knots": 5, "reference": 60}, {"variable": "lab"}],
        "split": {"times": [6, 12], "changing": ["age"]},
    },
    "subgroups": {"variables": ["site", "age"], "groups": 3},
}


@pytest.mark.parametrize(
    ("path", "value", "message"),
    [
        ("analyses.cox.variance", "sandwich", r"^analyses\.cox\.variance must be \"auto\""),
        ("analyses.cox.splines", {"variable": "age"}, r"cox\.splines must be a list"),
        ("analyses.cox.splines", [{"variable": "age", "knots": 9}], r"splines\[0\]\.knots must"),
        ("analyses.cox.splines", [{"knots": 4}], r"splines\[0\] lacks 'variable'"),
        ("analyses.cox.splines", [{"variable": "age", "k": 4}], r"splines\[0\]\.k is not a"),
        ("analyses.cox.split", {"times": []}, r"cox\.split\.times must have at least 1"),
        ("analyses.cox.split", {"times": [0]}, r"cox\.split\.times\[0\] must be a number"),
        ("analyses.cox.split", {"times": [5], "changing": "age"}, r"split\.changing must be a"),
        ("analyses.subgroups.groups", 1, r"^analyses\.subgroups\.groups must be a whole number"),
        ("analyses.subgroups.variables", "site", r"subgroups\.variables must be a list"),
    ],
)
def test_a_bad_setting_is_named_by_its_path(path, value, message):
    with pytest.raises(RecipeError, match=message):
        Recipe.from_dict(_with(path, value))


def test_good_settings_pass_and_round_trip():
    data = _with("analyses", json.loads(json.dumps(GOOD)))
    recipe = Recipe.from_dict(data)
    assert Recipe.from_json(recipe.to_json()) == recipe
    assert recipe.settings()["cox"]["split"] == {"times": [6, 12], "changing": ["age"]}
