"""The table in use, its roles and its prepared analysis frame, shared by every page.

A new table is read once (on a click or an upload) and kept in the session with its SHA-256.
Everything computed from it is cached on that fingerprint plus the settings, so changing a role
recomputes what depends on it and nothing else.
"""

from __future__ import annotations

import contextlib
import json
from collections.abc import MutableMapping
from dataclasses import replace
from pathlib import Path

import streamlit as st

from app import state
from engine.io.tables import ImportedTable, ImportOptions, read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles, suggest_roles

DEMO_DIR = Path(__file__).resolve().parents[1] / "demo_data"
DEMO_SUFFIXES = (".csv", ".tsv", ".txt", ".xlsx", ".parquet")
# The demo the app opens on: four groups, numeric and categorical covariates.
PREFERRED_DEMO_WORDS = ("pump", "group", "cohort")


def demo_files() -> list[Path]:
    """Bundled demo datasets, the one to open first leading."""
    if not DEMO_DIR.is_dir():
        return []
    files = sorted(p for p in DEMO_DIR.iterdir() if p.suffix.lower() in DEMO_SUFFIXES)

    def rank(path: Path) -> tuple[int, str]:
        hit = any(word in path.stem.lower() for word in PREFERRED_DEMO_WORDS)
        return (0 if hit else 1, path.name)

    return sorted(files, key=rank)


def demo_label(path: Path) -> str:
    return path.stem.replace("_", " ").replace("-", " ").capitalize()


def demo_description(path: Path) -> str:
    """The one-line description of a demo file from demo_data/README.md (``## name: text``)."""
    readme = DEMO_DIR / "README.md"
    if readme.is_file():
        for line in readme.read_text(encoding="utf-8").splitlines():
            if line.startswith("## ") and line[3:].startswith(path.name + ":"):
                return line[3 + len(path.name) + 1 :].strip()
    return ""


# Roles each bundled demo is documented with (demo_data/README.md); applied only when every
# named column is present, otherwise Hazel's own suggestions are used.
DEMO_ROLES: dict[str, dict] = {
    "pump_bearings.csv": {
        "time": "months_in_service",
        "unit": "months",
        "event": "failed",
        "event_values": (1,),
        "group": "supplier",
        "covariates": ("load_kN", "temperature_C", "lubricant"),
        "categorical": ("lubricant",),
    },
    "joint_trial.csv": {
        "time": None,
        "start": "enrolled",
        "end": "last_visit",
        "day_first": True,
        "unit": "months",
        "event": "outcome",
        "event_values": ("relapsed",),
        "group": "arm",
        "covariates": ("age_years", "weight_kg", "breed_size"),
        "categorical": ("breed_size",),
    },
    "compressor_service.csv": {
        "time": "to_day",
        "entry": "from_day",
        "id": "unit_id",
        "unit": "days",
        "event": "failed",
        "event_values": (1,),
        "group": "coating",
        "covariates": ("vibration_mm_s", "ambient_C", "firmware", "site"),
        "categorical": ("firmware", "site"),
    },
    "dairy_herd.csv": {
        "time": "weeks",
        "unit": "weeks",
        "event": "status",
        "event_values": ("died",),
        # made for competing risks: a sale ends follow-up as surely as a death does
        "event_causes": (("died", "died"), ("sold", "sold")),
        "group": "housing",
        "covariates": ("first_calving_age_months", "farm"),
        "categorical": ("farm",),
    },
}


def _demo_roles(table: ImportedTable) -> dict | None:
    preset = DEMO_ROLES.get(table.source_name)
    if preset is None:
        return None
    named = [v for k, v in preset.items() if k in ("time", "start", "end", "event", "group")]
    named += [*preset.get("covariates", ())]
    columns = {str(c) for c in table.frame.columns}
    return preset if all(v is None or v in columns for v in named) else None


def forget_source(session: MutableMapping) -> None:
    """Close and forget the aggregated source in use (``app.bigdata``), if any."""
    source = session.pop(state.SOURCE, None)
    session.pop(state.SOURCE_ID, None)
    if source is not None:
        with contextlib.suppress(Exception):  # a connection already gone needs no closing
            source.close()


def install_table(session: MutableMapping, table: ImportedTable, label: str, is_demo: bool) -> None:
    """Make ``table`` the one in use: suggested roles applied (and shown as suggestions)."""
    suggestions = suggest_roles(table.frame)
    forget_source(session)
    session[state.TABLE] = table
    session[state.DATASET_LABEL] = label
    session[state.DATASET_IS_DEMO] = is_demo
    session[state.ROLES_SUGGESTED] = suggestions
    preset = _demo_roles(table) if is_demo else None
    session[state.ROLES] = suggestions.to_roles(**(preset or {}))
    session[state.ROLES_PRESET] = preset is not None
    session[state.ROLES_CONFIRMED] = False  # applied at once, flagged until someone checks them
    session[state.DATA_VERSION] = session.get(state.DATA_VERSION, 0) + 1
    session.pop(state.LOAD_ERROR, None)
    from app.row_filters import forget_filters

    forget_filters(session)  # filters chose rows of the previous table
    state.forget_data_choices(session)


def open_demo(session: MutableMapping, path: Path) -> None:
    table = read_table(path)
    install_table(session, table, f"Demo: {demo_label(path)}", is_demo=True)


def open_upload(
    session: MutableMapping, content: bytes, name: str, options: ImportOptions | None = None
) -> ImportedTable:
    table = read_table(content, options or ImportOptions(), name=name)
    install_table(session, table, name, is_demo=False)
    return table


def ensure_table(session: MutableMapping) -> None:
    """Open the first bundled demo when nothing has been loaded in this session."""
    if state.TABLE in session or state.SOURCE in session:  # a big-data source counts too
        return
    demos = demo_files()
    if demos:
        try:
            open_demo(session, demos[0])
        except ValueError as error:  # a damaged demo must not stop the app
            session[state.LOAD_ERROR] = f"The bundled demo could not be opened: {error}"


def current_table(session: MutableMapping) -> ImportedTable | None:
    return session.get(state.TABLE)


def current_roles(session: MutableMapping) -> Roles | None:
    return session.get(state.ROLES)


def roles_key(roles: Roles) -> str:
    """A stable, hashable text for caching on the roles."""
    return json.dumps(roles.to_dict(), sort_keys=True, default=str)


def set_roles(session: MutableMapping, roles: Roles) -> None:
    session[state.ROLES] = roles


def confirm_roles(session: MutableMapping) -> None:
    """The user has checked the roles in use: the "suggested roles" notice goes away."""
    session[state.ROLES_CONFIRMED] = True


def roles_confirmed(session: MutableMapping) -> bool:
    """False while suggested roles are in use that nobody has checked."""
    return bool(session.get(state.ROLES_CONFIRMED, True))


def curve_roles(roles: Roles) -> Roles:
    """The roles curves and comparisons depend on: covariates play no part in them, so changing
    a covariate leaves their cached results alone."""
    return replace(roles, covariates=(), categorical=(), reference=())


def model_roles(roles: Roles) -> Roles:
    """The roles a Cox model depends on (the model builder picks its own strata)."""
    return replace(roles, group=None, strata=None)


def with_unit(roles: Roles, unit: str) -> Roles:
    """The same roles with durations expressed in ``unit`` (the engine converts)."""
    if roles.time is not None and roles.source_unit is None:
        roles = replace(roles, source_unit=roles.unit)
    return replace(roles, unit=unit)


@st.cache_resource(max_entries=8, show_spinner="Checking the data…")
def prepared_by_key(fingerprint: str, roles_text: str, _table: ImportedTable):
    # Kept as a resource (not copied on each use): the prepared frame may hold a million rows,
    # and nothing downstream modifies it.
    return prepare(_table.frame, Roles.from_dict(json.loads(roles_text)))


def prepared(table: ImportedTable, roles: Roles):
    """``engine.prepare.checks.prepare`` on the table in use, cached on its SHA-256 and the
    roles."""
    return prepared_by_key(table.sha256, roles_key(roles), table)
