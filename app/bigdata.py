"""Data that do not go through a browser upload: files in this computer's data folder and
PostgreSQL tables, kept where they are and aggregated there (``engine.aggregate``).

The data folder comes from ``HAZEL_DATA_FOLDER`` or the ``[hazel] data_folder`` entry of the
app's ``.streamlit/config.toml`` (read here with tomllib: Streamlit ignores that section). Only
paths whose real location (symlinks resolved) is inside the folder are opened. A file whose
analysis fits in ``AUTO_MEMORY_LIMIT`` (estimated from its rows x columns, the rule of ``--backend
auto``) is read into memory like an upload; a bigger one, or a folder of Parquet files, becomes an
aggregated source in the session. A database password is used to connect and then forgotten:
the source's ``name`` carries no credentials and nothing else keeps the password.
"""

from __future__ import annotations

import json
import os
import tomllib
import uuid
from collections.abc import MutableMapping
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import quote, urlsplit, urlunsplit

import streamlit as st

from app import data, state
from engine.aggregate.sources import STATEMENT_TIMEOUT
from engine.errors import HazelError
from engine.io import memory
from engine.prepare.roles import Roles, suggest_roles

DATA_FOLDER_ENV = "HAZEL_DATA_FOLDER"
CONFIG_FILE = Path(__file__).resolve().parents[1] / ".streamlit" / "config.toml"
CONFIG_SECTION, CONFIG_KEY = "hazel", "data_folder"
READABLE_SUFFIXES = (
    ".csv", ".tsv", ".txt", ".tab", ".xlsx", ".parquet", ".pq", ".sav", ".zsav", ".dta",
    ".sas7bdat", ".xpt",
)  # fmt: skip
AGGREGATABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".tab", ".parquet", ".pq")
NEEDS_ROWS = (
    "This page needs the rows themselves, which stay where they are with big data; open a "
    "sample or a smaller file (up to {limit}) to use it."
)


class DataFolderError(HazelError):
    """A path outside the data folder, or a data folder that is not set or not there."""


@dataclass(frozen=True)
class FolderEntry:
    """A file or Parquet folder inside the data folder, by its path relative to it."""

    name: str
    size: int
    is_folder: bool
    needs: int = 0  # estimated memory of an analysis in memory (``analysis_memory_needed``)

    @property
    def big(self) -> bool:
        return self.is_folder or self.needs > memory.AUTO_MEMORY_LIMIT


def memory_limit_text() -> str:
    return memory.megabytes(memory.AUTO_MEMORY_LIMIT)


def data_folder(config_file: Path = CONFIG_FILE) -> Path | None:
    """The configured data folder (the environment variable wins), or None."""
    text = os.environ.get(DATA_FOLDER_ENV, "").strip()
    if not text and config_file.is_file():
        with config_file.open("rb") as handle:
            text = str(tomllib.load(handle).get(CONFIG_SECTION, {}).get(CONFIG_KEY, "")).strip()
    return Path(text).expanduser() if text else None


def inside_folder(folder: Path, name: str) -> Path:
    """``folder / name`` with symlinks resolved, refused unless it stays inside ``folder``."""
    root = Path(folder).resolve()
    if not root.is_dir():
        raise DataFolderError(f"The data folder {str(folder)!r} does not exist or is not a folder.")
    target = (root / name).resolve()
    if target != root and root not in target.parents:
        raise DataFolderError(
            f"{name!r} is outside the data folder {str(root)!r} (it leads to {str(target)!r}); "
            "only files inside the data folder can be opened."
        )
    if not target.exists():
        raise DataFolderError(f"{name!r} is not in the data folder {str(root)!r}.")
    return target


def _has_parquet(folder: Path) -> bool:
    return any(p.suffix.lower() in (".parquet", ".pq") for p in folder.rglob("*"))


def folder_entries(folder: Path) -> list[FolderEntry]:
    """The readable files and Parquet folders directly inside ``folder`` that stay inside it."""
    root = Path(folder).resolve()
    entries = []
    for path in sorted(root.iterdir()):
        try:
            real = inside_folder(root, path.name)
        except DataFolderError:
            continue  # a symlink out of the folder is not listed (and refused if asked for)
        if real.is_dir() and _has_parquet(real):
            size = sum(p.stat().st_size for p in real.rglob("*") if p.is_file())
            entries.append(FolderEntry(path.name, size, True))
        elif real.is_file() and real.suffix.lower() in READABLE_SUFFIXES:
            needs = memory.analysis_memory_needed(real)
            entries.append(FolderEntry(path.name, real.stat().st_size, False, needs))
    return entries


# --- the aggregated source in use ------------------------------------------------------------


def in_use(session: MutableMapping) -> bool:
    return session.get(state.SOURCE) is not None


def install_source(session: MutableMapping, source, label: str) -> None:
    """Make an aggregated source the data in use: roles suggested from its first rows."""
    suggestions = suggest_roles(source.sample())
    data.forget_source(session)
    session.pop(state.TABLE, None)
    source.wait = stop_or_rerun
    session[state.SOURCE] = source
    session[state.SOURCE_ID] = uuid.uuid4().hex  # the cache key: a new source never reuses one
    session[state.DATASET_LABEL] = label
    session[state.DATASET_IS_DEMO] = False
    session[state.ROLES_SUGGESTED] = suggestions
    session[state.ROLES] = suggestions.to_roles()
    session[state.ROLES_PRESET] = False
    session[state.ROLES_CONFIRMED] = False
    session[state.DATA_VERSION] = session.get(state.DATA_VERSION, 0) + 1
    session.pop(state.LOAD_ERROR, None)
    state.forget_data_choices(session)


def stop_or_rerun() -> None:
    """Raise Streamlit's stop or rerun when this run should end (its Stop button, a click
    elsewhere): the source's ``wait`` hook, so a read in progress is cancelled in the
    database instead of running on after the page has moved on."""
    from streamlit.runtime.scriptrunner_utils.script_run_context import get_run_yield_check

    check = get_run_yield_check()
    if check is not None:
        check()


def open_from_folder(session: MutableMapping, folder: Path, name: str) -> str:
    """Open ``name`` from the data folder; "memory" or "aggregated" says how."""
    from engine.aggregate.sources import open_duckdb
    from engine.io.tables import read_table

    path = inside_folder(folder, name)
    if path.is_dir() or not memory.analysis_stays_in_memory(path):  # the rule of --backend auto
        if path.is_file() and path.suffix.lower() not in AGGREGATABLE_SUFFIXES:
            raise DataFolderError(
                f"{name!r} would need more than {memory_limit_text()} of memory; files that "
                "big are read where they are, which works for CSV and Parquet files. Save it "
                "as one of those."
            )
        install_source(session, open_duckdb(path), f"{name} (big data, read by DuckDB)")
        return "aggregated"
    data.install_table(session, read_table(path), name, is_demo=False)
    return "memory"


def database_url(url: str, password: str = "") -> str:
    """``url`` with ``password`` put in (the URL's own password is kept when none is given)."""
    url = url.strip()
    if not password:
        return url
    parts = urlsplit(url)
    user = quote(parts.username or "", safe="")
    host = parts.hostname or ""
    host = f"[{host}]" if ":" in host else host
    netloc = f"{user}:{quote(password, safe='')}@{host}" + (f":{parts.port}" if parts.port else "")
    return urlunsplit((parts.scheme, netloc, parts.path, parts.query, parts.fragment))


def without_secret(text: str, *secrets: str) -> str:
    """``text`` with every given secret (and its URL-quoted form) replaced by asterisks."""
    for secret in secrets:
        if secret:
            text = text.replace(secret, "****").replace(quote(secret, safe=""), "****")
    return text


def connect_database(
    session: MutableMapping,
    url: str,
    password: str = "",
    table: str = "",
    query: str = "",
    statement_timeout: float = STATEMENT_TIMEOUT,
) -> None:
    """Open a PostgreSQL table or read-only query as the data in use, each statement stopped
    by the server after ``statement_timeout`` seconds (0: no limit); errors never carry the
    password (or the URL's own)."""
    from engine.aggregate.sources import SourceError, is_database_url, open_postgres

    full = database_url(url, password)
    secrets = (password, urlsplit(full).password or "")
    if not is_database_url(full):
        raise SourceError(
            "The database address must start with postgresql:// (for example "
            "postgresql://USER@HOST:5432/DATABASE)."
        )
    try:
        source = open_postgres(
            full,
            table=table.strip() or None,
            query=query.strip() or None,
            statement_timeout=statement_timeout,
        )
    except HazelError as error:
        raise SourceError(without_secret(str(error), *secrets)) from None
    install_source(session, source, f"Database {source.name}")


# --- cached aggregates -------------------------------------------------------------------------


def _roles(roles_text: str) -> Roles:
    return Roles.from_dict(json.loads(roles_text))


@st.cache_resource(max_entries=8, show_spinner=False)
def aggregated(source_id: str, roles_text: str, _source):
    """``aggregate_checks`` on the source in use: the report and the counts, no rows."""
    from engine.aggregate.sql_checks import aggregate_checks

    return aggregate_checks(_source, _roles(roles_text))


@st.cache_resource(max_entries=16, show_spinner=False)
def curve_set(source_id: str, roles_text: str, confidence: float, transform: str, _source):
    from engine.aggregate.estimators import curves_from_counts

    counts = aggregated(source_id, roles_text, _source).counts
    return curves_from_counts(counts, confidence=confidence, transform=transform)


@st.cache_resource(max_entries=16, show_spinner=False)
def numbers_at_risk(source_id: str, roles_text: str, ticks: tuple, by_group: bool, _source):
    from engine.aggregate.estimators import numbers_at_risk_from_counts

    counts = aggregated(source_id, roles_text, _source).counts
    return numbers_at_risk_from_counts(counts, ticks, by_group=by_group)


@st.cache_resource(max_entries=16, show_spinner=False)
def analysis(source_id: str, roles_text: str, settings_text: str, _source) -> dict:
    """``run_aggregate_analysis`` (curves, comparison, Cox) for these roles and settings."""
    from engine.aggregate.analysis import run_aggregate_analysis

    data_ = aggregated(source_id, roles_text, _source)
    return run_aggregate_analysis(data_, json.loads(settings_text))


@st.cache_resource(max_entries=8, show_spinner=False)
def cox_model(source_id: str, roles_text: str, settings_text: str, _source):
    """The ``CoxResult`` and PH test of the roles' covariates, from per-time sums."""
    from engine.aggregate.analysis import cox_from_data
    from engine.analysis.run import resolved_settings

    data_ = aggregated(source_id, roles_text, _source)
    chosen = resolved_settings(json.loads(settings_text))["cox"]
    result, ph, _ = cox_from_data(data_, chosen)
    return result, ph
