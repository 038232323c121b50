"""Every recipe field is checked against engine/analysis/recipe.schema.json before use, and a bad
one is
named by its path with what it must be and what it holds (issue 10, item 3)."""

from __future__ import annotations

import json
from dataclasses import fields

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from app.cli import TESTS
from engine.analysis.recipe import Recipe, RecipeError
from engine.analysis.recipe_schema import SettingError, check_setting, recipe_schema
from engine.analysis.run import ANALYSIS_DEFAULTS
from engine.cox.diagnostics import TIME_SCALES
from engine.errors import HazelError
from engine.io.tables import ImportOptions
from engine.parametric.fits import DISTRIBUTIONS
from engine.prepare.filters import RULES
from engine.prepare.roles import TIME_UNITS, Roles
from engine.survival.curves import TRANSFORMS as CI_TRANSFORMS

MINIMAL = {
    "hazel_recipe": 1,
    "data": {"sha256": "ab" * 32, "rows": 3, "columns": ["t", "e"]},
    "roles": {"time": "t", "event": "e"},
    "analyses": {"curves": {}},
}


def _with(path: str, value) -> dict:
    """MINIMAL with ``value`` put at a dotted path (objects created on the way)."""
    data = json.loads(json.dumps(MINIMAL))
    *parents, last = path.split(".")
    node = data
    for part in parents:
        node = node.setdefault(part, {})
    node[last] = value
    return data


@pytest.mark.parametrize(
    ("path", "value", "message"),
    [
        (
            "analyses.sample_size.hazard_ratio",
            "x",
            r"^analyses\.sample_size\.hazard_ratio must be a number between 0 and 20 "
            r'\(0 and 1 excluded\); got "x"\.',
        ),
        ("analyses.sample_size.hazard_ratio", 1e308, r"hazard_ratio must be .*; got 1e\+308"),
        ("analyses.sample_size.allocation_ratio", [1], r"allocation_ratio must be a number"),
        ("analyses.sample_size.sides", 3, r"sides must be 1 or 2; got 3"),
        ("analyses.curves", [], r"^analyses\.curves must be an object; got \[\]"),
        ("analyses.curves.confidence", "0.9", r"curves\.confidence must be a number between 0"),
        ("analyses.curves.times", "12", r"curves\.times must be a list"),
        ("analyses.curves.times", [6, "12"], r"curves\.times\[1\] must be a number"),
        ("analyses.curves.confidance", 0.9, r"curves\.confidance is not a setting Hazel knows"),
        (
            "analyses.comparison.cut",
            {"column": "age", "groups": 10**18},
            r"comparison\.cut\.groups must be a whole number between 2 and 20; "
            r"got 1000000000000000000",
        ),
        ("analyses.comparison.cut", {"column": "age"}, r"comparison\.cut lacks 'groups'"),
        ("analyses.comparison.strata", 5, r"comparison\.strata must be null, false or text"),
        ("analyses.comparison.rho", -1, r"comparison\.rho must be a number between 0 and 10"),
        ("analyses.cox.reference", [["stage"]], r"cox\.reference\[0\] must have at least 2"),
        ("analyses.cox.covariates", {"age": 1}, r"cox\.covariates must be null or a list"),
        ("analyses.parametric.distributions", ["gamma"], r"distributions\[0\] must be"),
        ("analyses.landmark.time", -1, r"landmark\.time must be a number between 0"),
        ("analyses.baseline.summary", "mode", r"baseline\.summary must be .*median.*mean"),
        ("analyses.baseline.compare", "t-test", r"baseline\.compare must be"),
        ("analyses.baseline.variables", "age", r"baseline\.variables must be null or a list"),
        ("analyses.baseline.group", 3, r"baseline\.group must be null, false or text"),
        ("roles.unit", "fortnights", r'roles\.unit must be "days", "weeks", "months" or "years"'),
        ("roles.covariates", "a,b", r"roles\.covariates must be a list"),
        ("roles.day_first", "yes", r"roles\.day_first must be true/false"),
        (
            "roles.implausible_dates",
            "drop",
            r'roles\.implausible_dates must be "warn" or "exclude"',
        ),
        ("import_options.sep", ",,", r"import_options\.sep must have at most 1 character"),
        ("import_options.max_bytes", 1e30, r"import_options\.max_bytes must be a whole number"),
        ("data.rows", "12", r"data\.rows must be a whole number"),
        ("filters", {"column": "a"}, r"^filters must be a list"),
        (
            "filters",
            [{"column": "age", "rule": "between", "values": ["x", 2]}],
            r"filters\[0\]\.values\[0\] must be a number; got \"x\"",
        ),
        ("note", json.loads("[" * 14 + "1" + "]" * 14), r"note\[0\]\[0\].* nested more than 12"),
        ("software", [], r"software must be an object"),
        ("colour", "red", r"^colour is not a setting Hazel knows"),
    ],
)
def test_a_bad_field_is_named_by_its_path(path, value, message):
    with pytest.raises(RecipeError, match=message):
        Recipe.from_dict(_with(path, value))


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ('{"hazel_recipe": 1, "note": Infinity}', r"^note must be a finite number; got Infinity"),
        ('{"hazel_recipe": 1, "note": NaN}', r"^note must be a finite number; got NaN"),
        ('{"hazel_recipe": 1, "note": -1e999}', r"got -Infinity"),
        ('{"a":' * 100_000 + "1" + "}" * 100_000, "nested thousands of levels deep"),
        ("[" * 200_000 + "]" * 200_000, "nested thousands of levels deep"),
    ],
)
def test_json_that_python_reads_but_json_forbids_or_that_nests_too_deep(text, message):
    with pytest.raises(RecipeError, match=message):
        Recipe.from_json(text)


VERSION_0 = {
    "hazel_recipe": 0,
    "file": {"name": "trial.csv", "hash": "ab" * 32, "n_rows": 42, "columns": ["t", "e"]},
    "roles": {"time": "t", "event": "e"},
    "settings": {"times": [12]},
}


@pytest.mark.parametrize(
    ("key", "value", "message"),
    [
        ("file", [], r"^file must be an object; got \[\]"),
        ("file", {"hash": "a", "columns": []}, r"^file lacks 'n_rows'"),
        ("settings", {"times": "12"}, r"^settings\.times must be a list"),
        ("settings", {"confidence": 95}, r"^settings\.confidence must be a number between 0"),
        ("settings", [], r"^settings must be an object"),
        ("roles", [], r"^roles must be an object"),
        ("import", {"decimal": ";"}, r"^import\.decimal must be"),
    ],
)
def test_version_0_with_wrong_shapes_is_named_in_its_own_layout(key, value, message):
    with pytest.raises(RecipeError, match=message):
        Recipe.from_dict({**VERSION_0, key: value})


def test_a_recipe_hazel_writes_passes_the_schema_with_every_analysis():
    data = _with("analyses", {name: dict(values) for name, values in ANALYSIS_DEFAULTS.items()})
    data["analyses"]["landmark"]["time"] = 12
    data["roles"] = Roles(time="t", event="e", reference=(("stage", "II"),)).to_dict()
    data["import_options"] = ImportOptions(sep=",").to_dict()
    data["filters"] = [{"column": "age", "rule": "between", "values": [18, 80]}]
    recipe = Recipe.from_dict(data)
    assert Recipe.from_json(recipe.to_json()) == recipe


def test_every_setting_role_and_import_option_is_in_the_schema():
    """Whoever adds a setting adds it to engine/analysis/recipe.schema.json (COORDINATION.md)."""
    defs = recipe_schema()["$defs"]
    analyses = defs["analyses"]["properties"]
    for name, values in ANALYSIS_DEFAULTS.items():
        assert name in analyses, f"analysis {name!r} is not in recipe.schema.json"
        missing = set(values) - set(analyses[name]["properties"])
        assert not missing, f"settings of {name!r} not in recipe.schema.json: {missing}"
    assert {f.name for f in fields(Roles)} == set(defs["roles"]["properties"])
    assert {f.name for f in fields(ImportOptions)} == set(defs["import_options"]["properties"])


def test_the_schema_lists_the_engine_choices():
    defs = recipe_schema()["$defs"]
    assert tuple(defs["test"]["enum"]) == TESTS
    assert tuple(defs["ci_transform"]["enum"]) == CI_TRANSFORMS
    assert tuple(defs["ph_time_scale"]["enum"]) == TIME_SCALES
    assert tuple(defs["distribution"]["enum"]) == DISTRIBUTIONS
    assert tuple(defs["unit"]["enum"]) == tuple(TIME_UNITS)
    assert tuple(defs["filter"]["properties"]["rule"]["enum"]) == RULES


@pytest.mark.parametrize(
    ("analysis", "setting", "value", "message"),
    [
        ("sample_size", "hazard_ratio", 1e308, r"^--power-hr must be a number between 0 and 20"),
        ("sample_size", "events", -3.0, r"^--events must be a number between 0 and 1000000000 "),
        ("comparison", "rho", float("nan"), r"^--rho must be a finite number; got nan"),
        ("curves", "times", [1.0, -2.0], r"^--times: each value must be a number between 0"),
    ],
)
def test_one_setting_is_checked_against_the_same_ranges_under_its_option_name(
    analysis, setting, value, message
):
    option = {"hazard_ratio": "--power-hr"}.get(setting, "--" + setting)
    with pytest.raises(SettingError, match=message):
        check_setting(analysis, setting, value, option)


JSON = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=5),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=5), inner),
    max_leaves=8,
)
PATHS = [
    "hazel_recipe", "data", "data.rows", "data.columns", "roles", "roles.time", "roles.reference",
    "roles.event_values", "import_options", "import_options.sheet", "filters", "analyses",
    "analyses.curves", "analyses.curves.times", "analyses.comparison.cut", "analyses.cox",
    "analyses.cox.reference", "analyses.sample_size.power", "analyses.parametric.distributions",
    "analyses.landmark", "note", "software",
]  # fmt: skip


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(path=st.sampled_from(PATHS), value=JSON)
def test_any_value_anywhere_gives_a_recipe_or_one_clear_error(path, value):
    """Property: a recipe with any JSON value at any field is read or refused with a Hazel
    error, never another exception; and what is read has defaults the analyses accept."""
    try:
        recipe = Recipe.from_dict(_with(path, value))
    except HazelError as error:
        assert str(error)
        return
    for name, chosen in recipe.settings().items():
        assert isinstance(chosen, dict), name


def test_the_rmst_origin_takes_the_engines_origins_only(tmp_path):
    """The recipe's curves.rmst_origin holds the engine's origins (and the CLI option names
    itself when refused)."""
    from app.cli import main
    from engine.survival.rmst import RMST_ORIGINS

    for origin in RMST_ORIGINS:
        check_setting("curves", "rmst_origin", origin, "--rmst-origin")
    with pytest.raises(SettingError, match="--rmst-origin"):
        check_setting("curves", "rmst_origin", "midpoint", "--rmst-origin")
    assert ANALYSIS_DEFAULTS["curves"]["rmst_origin"] == "zero"
    path = tmp_path / "d.csv"
    path.write_text("t,e\n1,1\n2,0\n3,1\n")
    args = ["analyze", str(path), "--time", "t", "--event", "e", "--rmst-origin", "later"]
    assert main(args) == 2
