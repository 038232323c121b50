"""The one place a recipe's fields are checked: its JSON Schema, and messages a person can act on.

``engine/analysis/recipe.schema.json`` states every field's type and range (version 2, and the early
version-0 layout under ``$defs/version_0``; a version-1 recipe differs from version 2 only in the
names of a few settings and is checked once they are migrated). ``validated_recipe`` checks a
decoded recipe against it before anything reads a field, so a hand-edited or hostile recipe
gives one message naming the field's path, what it must be and what it holds
(``analyses.sample_size.hazard_ratio must be a number between 0 and 20 (0 and 1 excluded);
got "x"``), never an exception from deep inside an analysis.

Two things JSON Schema cannot say are checked first, without recursion: how deeply the recipe is
nested (a recipe is a few levels deep; thousands of levels would exhaust the interpreter's stack)
and that every number is finite (Python's JSON reader accepts ``Infinity`` and ``NaN``).
"""

from __future__ import annotations

import json
import math
from functools import lru_cache
from pathlib import Path

from engine.errors import HazelError

SCHEMA_PATH = Path(__file__).with_name("recipe.schema.json")
MAX_DEPTH = 12  # the deepest field of a recipe is 5 levels down (roles.reference[0][1])


class RecipeError(HazelError):
    """The file is not a recipe Hazel can read (not JSON, unknown version, a field out of range)."""


class SettingError(HazelError):
    """An analysis setting given outside a recipe (a command-line option) is out of range."""


@lru_cache(maxsize=1)
def recipe_schema() -> dict:
    """The recipe's JSON Schema as shipped with Hazel (read once; not to be changed)."""
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


@lru_cache(maxsize=2)
def _validator(layout: str):
    from jsonschema import Draft202012Validator

    schema = recipe_schema()
    if layout == "version_0":
        schema = {
            "$schema": schema["$schema"],
            "$defs": schema["$defs"],
            "$ref": f"#/$defs/{layout}",
        }
    return Draft202012Validator(schema)


@lru_cache(maxsize=64)
def _setting_validator(analysis: str, setting: str):
    from jsonschema import Draft202012Validator

    schema = recipe_schema()
    one = schema["$defs"]["analyses"]["properties"][analysis]["properties"][setting]
    return Draft202012Validator({"$schema": schema["$schema"], "$defs": schema["$defs"], **one})


def check_setting(analysis: str, setting: str, value, name: str) -> None:
    """Check one analysis setting against the recipe's schema, naming it ``name`` in the message
    (the command line passes its option, ``--power-hr``): one table of ranges for both."""
    try:
        check_plain_json(value)
    except RecipeError:
        raise SettingError(f"{name} must be a finite number; got {value!r}.") from None
    errors = sorted(_setting_validator(analysis, setting).iter_errors(value), key=_order)
    if errors:
        message = friendly_message(errors[0])
        if errors[0].absolute_path:  # an entry of a list: name the option, not the entry
            message = message.split(" must ", 1)[1].join((f"{name}: each value must ", ""))
        else:
            message = message.replace("The recipe must", f"{name} must", 1)
        raise SettingError(message.replace(" or null;", ";"))  # an option cannot be null


def field_path(parts) -> str:
    """``analyses.cox.reference[0][1]`` from the parts of a JSON path."""
    text = ""
    for part in parts:
        text += f"[{part}]" if isinstance(part, int) else (f".{part}" if text else str(part))
    return text


def check_plain_json(data, max_depth: int = MAX_DEPTH) -> None:
    """Refuse nesting deeper than ``max_depth`` and non-finite numbers, naming the field.

    Iterative (an explicit stack), so a recipe nested a million levels deep is refused with a
    message instead of exhausting the interpreter's stack."""
    stack = [((), data)]
    while stack:
        path, value = stack.pop()
        if isinstance(value, float) and not math.isfinite(value):
            shown = "NaN" if math.isnan(value) else ("Infinity" if value > 0 else "-Infinity")
            raise RecipeError(
                f"{field_path(path) or 'The recipe'} must be a finite number; got {shown} "
                "(which JSON does not allow). Write a number such as 0.7, or remove the setting."
            )
        if isinstance(value, dict | list):
            if len(path) >= max_depth:
                raise RecipeError(
                    f"{field_path(path)} is nested more than {max_depth} levels deep; a Hazel "
                    "recipe is only a few levels deep. Save the recipe again from Hazel."
                )
            items = value.items() if isinstance(value, dict) else enumerate(value)
            stack.extend(((*path, key), item) for key, item in items)


# the layout the schema's top level describes (engine.analysis.recipe.CURRENT_VERSION)
CHECKED_LAYOUT = 2


def check_layout(data, version: int) -> None:
    """Check a recipe object of layout ``version`` (0 or 2) against the schema; a RecipeError
    names the first field out of place. Version 1 is checked after its migration to 2 (only
    setting names changed); other versions are refused by the migration, not here.

    A version-0 recipe is checked against its own layout before it is migrated, so a wrong shape
    is named by the path the user wrote; after migration it is checked again as version 2."""
    if version == 0:
        _raise_first_error(_validator("version_0"), data)
    elif version == CHECKED_LAYOUT:
        _raise_first_error(_validator("current"), data)


def _raise_first_error(validator, data) -> None:
    errors = sorted(validator.iter_errors(data), key=_order)
    if errors:
        raise RecipeError(friendly_message(errors[0]) + " Correct the recipe or save it again.")


# --- messages ------------------------------------------------------------------------------------


def friendly_message(error) -> str:
    """One sentence from a validator error: the field's path, what it must be, what it holds."""
    if error.validator == "anyOf":  # the branch of the value's own shape says what went wrong
        inner = _errors_of_matching_branch(error)
        if inner:
            return friendly_message(inner[0])
    path = field_path(error.absolute_path)
    where = path or "The recipe"
    kind, rule, instance = error.validator, error.validator_value, error.instance
    if kind == "required":
        missing = [k for k in rule if k not in instance]
        return f"{where} lacks {_quoted(missing)}; the file may be damaged or hand-edited."
    if kind == "additionalProperties":
        known = list(error.schema.get("properties", {}))
        extra = [k for k in instance if k not in known]
        first = field_path([*error.absolute_path, extra[0]])
        return f"{first} is not a setting Hazel knows here; " + (
            f"the known ones are {_quoted(known)}." if known else "remove it."
        )
    if kind in ("maxItems", "minItems", "maxProperties", "maxLength", "minLength"):
        limit = "at most" if kind.startswith("max") else "at least"
        one, many = ("character", "characters") if kind.endswith("Length") else ("entry", "entries")
        what = one if rule == 1 else many
        return f"{where} must have {limit} {rule} {what}; got {_shown(instance)}."
    if kind == "uniqueItems":
        return f"{where} must not repeat an entry; got {_shown(instance)}."
    return f"{where} must be {expected(error.schema)}; got {_shown(instance)}."


JSON_TYPES = {
    "null": lambda v: v is None,
    "boolean": lambda v: isinstance(v, bool),
    "integer": lambda v: isinstance(v, int) and not isinstance(v, bool),
    "number": lambda v: isinstance(v, int | float) and not isinstance(v, bool),
    "string": lambda v: isinstance(v, str),
    "array": lambda v: isinstance(v, list),
    "object": lambda v: isinstance(v, dict),
}


def _errors_of_matching_branch(error) -> list:
    """The errors inside the one ``anyOf`` branch whose type fits the value (an object given
    for ``null or {column, groups}``), so the message names the inner field; else none."""
    fitting = []
    for index, branch in enumerate(error.validator_value):
        kinds = _resolve(branch).get("type", [])
        kinds = [kinds] if isinstance(kinds, str) else kinds
        if any(JSON_TYPES[kind](error.instance) for kind in kinds):
            fitting.append(index)
    if len(fitting) != 1:
        return []
    inner = [e for e in error.context if e.schema_path and e.schema_path[0] == fitting[0]]
    return sorted(inner, key=_order)


def _order(error):
    return (len(error.path), list(map(str, error.path)))


def _resolve(schema: dict) -> dict:
    ref = schema.get("$ref")
    if ref and ref.startswith("#/$defs/"):
        return recipe_schema()["$defs"][ref.removeprefix("#/$defs/")]
    return schema


def expected(schema: dict) -> str:
    """What a value of this (sub)schema must be, in words: 'a number between 0 and 1'."""
    schema = _resolve(schema)
    if "anyOf" in schema:
        return _either([expected(part) for part in schema["anyOf"]])
    if "enum" in schema:
        return _either([_literal(v) for v in schema["enum"]])
    if "const" in schema:
        return _literal(schema["const"])
    kinds = schema.get("type", [])
    kinds = [kinds] if isinstance(kinds, str) else list(kinds)
    return _either([_one_type(kind, schema) for kind in kinds]) if kinds else "a valid value"


def _one_type(kind: str, schema: dict) -> str:
    if kind in ("number", "integer"):
        return _range("a whole number" if kind == "integer" else "a number", schema)
    if kind == "string":
        if schema.get("maxLength") == 1:
            return "a single character"
        return "text"
    if kind == "array":
        items = schema.get("items") or (schema.get("prefixItems") or [None])[0]
        size = (
            f" of {schema['minItems']}" if schema.get("minItems") == schema.get("maxItems") else ""
        )
        return f"a list{size}" + (f" (each entry {expected(items)})" if items else "")
    if kind == "boolean":
        return "true/false"
    if kind == "object":
        return "an object"
    return kind  # null


def _range(noun: str, schema: dict) -> str:
    low = schema.get("minimum", schema.get("exclusiveMinimum"))
    high = schema.get("maximum", schema.get("exclusiveMaximum"))
    excluded = [schema[k] for k in ("exclusiveMinimum", "exclusiveMaximum") if k in schema]
    if "not" in schema and "const" in schema["not"]:
        excluded.append(schema["not"]["const"])
    if low is not None and high is not None:
        text = f"{noun} between {_number(low)} and {_number(high)}"
    elif low is not None:
        text = f"{noun} of at least {_number(low)}"
    elif high is not None:
        text = f"{noun} of at most {_number(high)}"
    else:
        return noun
    if excluded:
        text += f" ({' and '.join(_number(v) for v in sorted(excluded))} excluded)"
    return text


def _number(value) -> str:
    return f"{value:g}".replace("e+", "e") if isinstance(value, float) else str(value)


def _literal(value) -> str:
    return json.dumps(value)


def _either(options: list[str]) -> str:
    options = list(dict.fromkeys(options))
    return options[0] if len(options) == 1 else ", ".join(options[:-1]) + " or " + options[-1]


def _quoted(names) -> str:
    return ", ".join(f"'{n}'" for n in names)


def _shown(value, limit: int = 80) -> str:
    try:
        text = json.dumps(value, ensure_ascii=True)
    except (TypeError, ValueError):
        text = repr(value)
    return text if len(text) <= limit else text[: limit - 1] + "…"
