"""Recipes: everything needed to repeat an analysis on the same file, and nothing of the data.

A recipe is a small versioned JSON object: the import options, the column roles, the row filters,
the analyses chosen with their settings, and a fingerprint of the data (the file's SHA-256, its
row count and column names) so that a colleague replaying it learns when their file differs.
The layout is documented in the README ("Recipes and reports"). Older layouts are migrated on
reading; a newer one is refused with a message saying so.
"""

from __future__ import annotations

import copy
import json
import platform
from collections.abc import Callable
from dataclasses import dataclass, field
from importlib import metadata

from engine.analysis.recipe_schema import RecipeError, check_layout, check_plain_json
from engine.analysis.run import ANALYSIS_DEFAULTS
from engine.prepare.filters import RowFilter

VERSION_KEY = "hazel_recipe"
CURRENT_VERSION = 2
MAX_RECIPE_BYTES = 1_000_000  # a recipe holds settings only; anything larger is not one

# The analyses a recipe can ask for, with their settings and defaults, live in engine.analysis.run
# (one source for the command line, the report and the app). Unknown analysis names are kept as
# they are (a later Hazel may add some) but only the known ones are run.
# Version 0 recipes knew only these three analyses.
VERSION_0_ANALYSES = ("curves", "comparison", "cox")

SOFTWARE = ("python", "numpy", "pandas", "scipy", "lifelines")


def software_versions() -> dict[str, str]:
    """Versions of the software that computes the numbers, for recipes and methods text."""
    versions = {"python": platform.python_version()}
    for name in SOFTWARE[1:]:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


@dataclass(frozen=True)
class DataFingerprint:
    """What identifies the data without holding any of it: for a file its SHA-256, for rows
    that stay in a database (``sha256`` empty) the source's name, rows and columns; and the
    backend that aggregated them. A source's name never carries a user name or password."""

    sha256: str
    rows: int
    columns: tuple[str, ...]
    file_name: str | None = None
    backend: str = "memory"

    def to_dict(self) -> dict:
        return {
            "file_name": self.file_name,
            "sha256": self.sha256,
            "rows": self.rows,
            "columns": list(self.columns),
            "backend": self.backend,
        }

    @classmethod
    def from_dict(cls, data: dict) -> DataFingerprint:
        _require(data, ("sha256", "rows", "columns"), "data")
        return cls(
            sha256=str(data["sha256"]),
            rows=int(data["rows"]),
            columns=tuple(str(c) for c in data["columns"]),
            file_name=data.get("file_name"),
            backend=str(data.get("backend", "memory")),
        )

    @classmethod
    def of(cls, imported, file_name: str | None = None) -> DataFingerprint:
        """The fingerprint of an ``engine.io.tables.ImportedTable`` (see its ``fingerprint()``)."""
        found = imported.fingerprint()
        return cls(
            sha256=str(found["sha256"]),
            rows=int(found["rows"]),
            columns=tuple(str(c) for c in found["columns"]),
            file_name=file_name if file_name is not None else imported.source_name,
        )


@dataclass(frozen=True)
class Recipe:
    """One analysis, replayable: import options, roles, filters, analyses and a data fingerprint.

    ``import_options`` and ``roles`` are the ``to_dict()`` forms of
    ``engine.io.tables.ImportOptions``
    and ``engine.prepare.roles.Roles``; ``analyses`` maps an analysis name (see
    ``ANALYSIS_DEFAULTS``) to
    its settings. The dicts are copied in and out so a recipe never shares state with its caller.
    """

    fingerprint: DataFingerprint
    import_options: dict = field(default_factory=dict)
    roles: dict = field(default_factory=dict)
    filters: tuple[RowFilter, ...] = ()
    analyses: dict = field(default_factory=dict)
    software: dict = field(default_factory=dict)
    note: str = ""

    def __post_init__(self):
        for name in ("import_options", "roles", "analyses", "software"):
            object.__setattr__(self, name, copy.deepcopy(dict(getattr(self, name))))
        object.__setattr__(self, "filters", tuple(self.filters))

    def settings(self) -> dict[str, dict]:
        """Each chosen analysis's settings, with defaults filled in for what the recipe omits."""
        return {
            name: {**ANALYSIS_DEFAULTS.get(name, {}), **copy.deepcopy(values or {})}
            for name, values in self.analyses.items()
        }

    def to_dict(self) -> dict:
        return {
            VERSION_KEY: CURRENT_VERSION,
            "data": self.fingerprint.to_dict(),
            "import_options": copy.deepcopy(self.import_options),
            "roles": copy.deepcopy(self.roles),
            "filters": [f.to_dict() for f in self.filters],
            "analyses": copy.deepcopy(self.analyses),
            "software": copy.deepcopy(self.software),
            "note": self.note,
        }

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=2, ensure_ascii=False, allow_nan=False) + "\n"

    @classmethod
    def from_dict(cls, data: dict) -> Recipe:
        """Every field is checked against ``engine/analysis/recipe.schema.json`` before it is
        used."""
        check_plain_json(data)
        check_layout(data, recipe_version(data))
        data = migrate(data)
        check_layout(data, CURRENT_VERSION)
        return cls(
            fingerprint=DataFingerprint.from_dict(data["data"]),
            import_options=data.get("import_options", {}),
            roles=data["roles"],
            filters=tuple(RowFilter.from_dict(f) for f in data.get("filters", [])),
            analyses=data["analyses"],
            software=data.get("software", {}),
            note=str(data.get("note", "")),
        )

    @classmethod
    def from_json(cls, text: str | bytes) -> Recipe:
        if len(text) > MAX_RECIPE_BYTES:
            raise RecipeError(
                f"This file is {len(text):,} bytes; a Hazel recipe holds settings only and is far "
                f"smaller (limit {MAX_RECIPE_BYTES:,}). Did you choose the data file by mistake?"
            )
        if isinstance(text, bytes):
            try:
                text = text.decode("utf-8-sig")
            except UnicodeDecodeError:
                raise RecipeError(
                    "This file is not a Hazel recipe: it is not UTF-8 text (recipes are JSON)."
                ) from None
        try:
            data = json.loads(text)
        except json.JSONDecodeError as err:
            raise RecipeError(
                f"This file is not a Hazel recipe: it is not valid JSON ({err.msg} at line "
                f"{err.lineno}, column {err.colno})."
            ) from None
        except RecursionError:
            raise RecipeError(
                "This file is not a Hazel recipe: it is nested thousands of levels deep (a "
                "recipe is only a few levels deep)."
            ) from None
        return cls.from_dict(data)


def make_recipe(imported, roles, analyses: dict, filters=(), note: str = "") -> Recipe:
    """The recipe for an analysis of ``imported`` (an ``ImportedTable``) as it stands now.

    ``roles`` is an ``engine.prepare.roles.Roles`` (or its ``to_dict()``); the import options saved
    are
    the ones actually used to read the file, so a replay does not depend on detection again.
    """
    return Recipe(
        fingerprint=DataFingerprint.of(imported),
        import_options=imported.options.to_dict(),
        roles=roles if isinstance(roles, dict) else roles.to_dict(),
        filters=tuple(filters),
        analyses=analyses,
        software=software_versions(),
        note=note,
    )


def _require(data, keys, what: str) -> None:
    if not isinstance(data, dict):
        raise RecipeError(f"The {what} part of the recipe must be an object, not {data!r}.")
    missing = [k for k in keys if k not in data]
    if missing:
        raise RecipeError(
            f"The {what} part of the recipe lacks {', '.join(repr(k) for k in missing)}; "
            "the file may be damaged or hand-edited. Save the recipe again from Hazel."
        )


# Migrations: version n -> n + 1, applied in turn until the current version.


def _migrate_0_to_1(old: dict) -> dict:
    """Version 0 (the first draft layout): one flat 'settings' object, fingerprint under 'file'.

    Version 0 looked like ``{"hazel_recipe": 0, "file": {"name", "hash", "n_rows", "columns"},
    "import": {...}, "roles": {...}, "settings": {"times", "ci_transform", "confidence", "test",
    "ties", "ph_transform"}}`` with no filters; every setting belonged to one analysis, and
    the comparison and Cox model ran only when the roles had a group and covariates.
    """
    _require(old, ("file", "roles"), "recipe")
    _require(old["file"], ("hash", "n_rows", "columns"), "file")
    settings = dict(old.get("settings", {}))
    analyses: dict[str, dict] = {"curves": {}}
    owner: dict[str, str] = {"ph_transform": "cox"}  # its version-1 name (renamed in 2)
    for key in VERSION_0_ANALYSES:  # a name two analyses share belongs to the first (curves)
        for name in ANALYSIS_DEFAULTS[key]:
            owner.setdefault(name, key)
    if old["roles"].get("group"):
        analyses["comparison"] = {}
    if old["roles"].get("covariates"):
        analyses["cox"] = {}
    for name, value in settings.items():
        analysis = owner.get(name)
        if analysis is None:
            raise RecipeError(
                f"The version 0 recipe has a setting '{name}' that Hazel does not know; "
                "remove it or save the recipe again from Hazel."
            )
        analyses.setdefault(analysis, {})[name] = value
    return {
        VERSION_KEY: 1,
        "data": {
            "file_name": old["file"].get("name"),
            "sha256": old["file"]["hash"],
            "rows": old["file"]["n_rows"],
            "columns": old["file"]["columns"],
        },
        "import_options": old.get("import", {}),
        "roles": old["roles"],
        "filters": [],
        "analyses": analyses,
        "software": {},
        "note": "",
    }


# Version 2 names settings in Hazel's own words: the proportional-hazards time scale and the
# parametric families (old value -> new value), and the roles' day-first switch.
PH_TIME_SCALES_BEFORE_2 = {"km": "survival", "rank": "rank", "identity": "time", "log": "log-time"}
DISTRIBUTIONS_BEFORE_2 = {"lognormal": "log-normal", "loglogistic": "log-logistic"}


def _migrate_1_to_2(old: dict) -> dict:
    """Version 1 -> 2: ``cox.ph_transform`` (km, rank, identity, log) becomes
    ``cox.ph_time_scale`` (survival, rank, time, log-time); the parametric ids ``lognormal`` and
    ``loglogistic`` become ``log-normal`` and ``log-logistic``; ``roles.dayfirst`` becomes
    ``roles.day_first``. Values Hazel never wrote are left for the checks to refuse."""
    new = copy.deepcopy(old)
    new[VERSION_KEY] = 2
    analyses = new.get("analyses")
    if isinstance(analyses, dict):
        cox = analyses.get("cox")
        if isinstance(cox, dict) and "ph_transform" in cox:
            value = cox.pop("ph_transform")
            cox.setdefault("ph_time_scale", PH_TIME_SCALES_BEFORE_2.get(value, value))
        parametric = analyses.get("parametric")
        if isinstance(parametric, dict):
            if isinstance(parametric.get("distributions"), list):
                parametric["distributions"] = [
                    DISTRIBUTIONS_BEFORE_2.get(d, d) if isinstance(d, str) else d
                    for d in parametric["distributions"]
                ]
            if isinstance(parametric.get("aft_distribution"), str):
                name = parametric["aft_distribution"]
                parametric["aft_distribution"] = DISTRIBUTIONS_BEFORE_2.get(name, name)
    roles = new.get("roles")
    if isinstance(roles, dict) and "dayfirst" in roles:
        value = roles.pop("dayfirst")
        roles.setdefault("day_first", value)
    return new


MIGRATIONS: dict[int, Callable[[dict], dict]] = {0: _migrate_0_to_1, 1: _migrate_1_to_2}


def recipe_version(data) -> int:
    """The layout version of a recipe object, or a RecipeError saying why there is none."""
    if not isinstance(data, dict) or VERSION_KEY not in data:
        raise RecipeError(
            f"This file is not a Hazel recipe: it has no '{VERSION_KEY}' version key. "
            "Choose a recipe saved by Hazel (a .json file from 'Download recipe')."
        )
    version = data[VERSION_KEY]
    if isinstance(version, bool) or not isinstance(version, int):
        raise RecipeError(
            f"The recipe's version '{VERSION_KEY}' must be a whole number; got {version!r}."
        )
    return version


def migrate(data: dict) -> dict:
    """Bring a recipe object of any known version up to the current layout (a new dict)."""
    version = recipe_version(data)
    if version > CURRENT_VERSION:
        raise RecipeError(
            f"This recipe was saved by a newer Hazel (recipe version {version}); this Hazel reads "
            f"versions up to {CURRENT_VERSION}. Update Hazel to replay it."
        )
    if version < 0 or (version < CURRENT_VERSION and version not in MIGRATIONS):
        raise RecipeError(f"Recipe version {version} is not one Hazel has ever written.")
    data = copy.deepcopy(data)
    while version < CURRENT_VERSION:
        data = MIGRATIONS[version](data)
        version = recipe_version(data)
    return data


def check_fingerprint(recipe: Recipe, imported) -> list[str]:
    """What differs between the recipe's data and this ``ImportedTable``; empty when the same.

    A difference is a warning, not an error: a colleague may replay a recipe on an updated export
    on purpose, and must be told what changed so the numbers are not mistaken for the original.
    """
    return fingerprint_differences(recipe.fingerprint, DataFingerprint.of(imported))


def fingerprint_differences(expected: DataFingerprint, actual: DataFingerprint) -> list[str]:
    """What differs between two fingerprints; the SHA-256 is compared only where both have
    one (rows in a database have none, so their rows and columns are compared)."""
    made_with = f" ({expected.file_name})" if expected.file_name else ""
    differences = []
    if actual.sha256 and expected.sha256 and actual.sha256 != expected.sha256:
        differences.append(
            f"The data file is not the one the recipe was made with{made_with}: its SHA-256 is "
            f"{actual.sha256[:12]}…, the recipe expects {expected.sha256[:12]}…. Results may "
            "differ from the original analysis."
        )
    if actual.rows != expected.rows:
        differences.append(
            f"The recipe was made on {expected.rows:,} rows; this file has {actual.rows:,} rows."
        )
    missing = [c for c in expected.columns if c not in actual.columns]
    added = [c for c in actual.columns if c not in expected.columns]
    if missing:
        differences.append(f"Columns in the recipe's data but not in this file: {_names(missing)}.")
    if added:
        differences.append(f"Columns in this file but not in the recipe's data: {_names(added)}.")
    if not missing and not added and actual.columns != expected.columns:
        differences.append("The columns are the same but in a different order.")
    return differences


def _names(columns: list[str], limit: int = 10) -> str:
    shown = ", ".join(f"'{c}'" for c in columns[:limit])
    rest = len(columns) - limit
    return shown + (f" and {rest} more" if rest > 0 else "")
