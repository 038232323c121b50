"""Invented raw data with every exclusion reason, and a comparison of analyze JSON objects."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pandas as pd

from engine.aggregate.sql import literal
from engine.prepare.filters import RowFilter
from engine.prepare.roles import Roles


def messy_frame(seed: int = 0, n: int = 1500) -> pd.DataFrame:
    """Day-rounded times (ties), text events with an unknown code, 3 sites with gaps, strata,
    delayed entry, a numeric and a categorical covariate with missing values, and rows that
    meet every exclusion reason the roles below can produce."""
    rng = np.random.default_rng(seed)
    age = np.round(rng.normal(62, 9, n), 1)
    site = rng.choice(["north", "south", "east"], n, p=[0.5, 0.3, 0.2]).astype(object)
    risk = np.exp(0.04 * (age - 62) + np.where(site == "south", 0.4, 0.0))
    time = np.ceil(rng.exponential(200 / risk)).astype(float)
    status = np.where(rng.random(n) < 0.65, "dead", "alive").astype(object)
    frame = pd.DataFrame(
        {
            "days": time,
            "status": status,
            "site": site,
            "ward": rng.choice(["A", "B"], n).astype(object),
            "enrolled": np.floor(time * rng.random(n) * 0.5),
            "age": age,
            "stage": rng.choice(["I", "II", "III"], n).astype(object),
        }
    )
    picks = rng.permutation(n)
    frame.loc[picks[:15], "days"] = np.nan  # missing time
    frame.loc[picks[15:25], "days"] = -3.0  # negative time
    frame.loc[picks[25:35], "status"] = None  # missing event
    frame.loc[picks[35:40], "status"] = "lost?"  # unknown event value
    frame.loc[picks[40:48], "enrolled"] = np.nan  # missing entry
    frame.loc[picks[48:60], "enrolled"] = frame.loc[picks[48:60], "days"] + 1  # entry after exit
    frame.loc[picks[60:110], "site"] = None  # rows without a group
    frame.loc[picks[110:150], "age"] = np.nan  # missing covariates
    frame.loc[picks[150:170], "stage"] = None
    frame.loc[picks[170:180], "ward"] = None  # rows without a stratum
    return frame


ROLES = Roles(
    time="days",
    event="status",
    group="site",
    covariates=("age", "stage"),
    categorical=("stage",),
    strata="ward",
    entry="enrolled",
)

SETTINGS = {
    "curves": {"times": [100.0, 365.0], "confidence": 0.9},
    "comparison": {"test": "tarone-ware"},
    "cox": {"ties": "efron", "ph_time_scale": "survival"},
}


# Row filters of every rule: on a number column with NaN, text columns with NULL, a role column.
FILTERS = (
    RowFilter("age", "between", (50, 75)),
    RowFilter("site", "not_in", ("east",)),
    RowFilter("stage", "in", ("I", "II", "IV")),
    RowFilter("days", "at_least", (2,)),
    RowFilter("enrolled", "at_most", (400.5,)),
    RowFilter("ward", "not_missing"),
    RowFilter("days", "not_in", ("5", "7.0", "x")),  # numbers compared as numbers
)


def aggregate_json(source, roles: Roles, settings=SETTINGS, filters=()) -> dict:
    """``run_aggregate_analysis`` of ``roles`` on an open source, which is closed after; with
    ``filters``, their outcome under "filters" as the command line writes it."""
    from engine.aggregate.analysis import run_aggregate_analysis
    from engine.aggregate.sql_checks import aggregate_checks

    try:
        data = aggregate_checks(source, roles, filters=filters)
        result = run_aggregate_analysis(data, settings)
        if filters:
            result["filters"] = data.filtered.to_dict()
        return result
    finally:
        source.close()


def memory_json(frame, roles: Roles, settings=SETTINGS, filters=()) -> dict:
    """The same in memory: the filters applied before ``prepare``."""
    from engine.analysis.run import run_analysis
    from engine.prepare.checks import prepare
    from engine.prepare.filters import apply_filters

    filtered = apply_filters(frame, filters)
    result = run_analysis(prepare(filtered.frame, roles), settings)
    if filters:
        result["filters"] = filtered.to_dict()
    return result


# keys a database's result has beside memory's: the error bound of Harrell's C of score bins
DATABASE_ONLY_KEYS = frozenset({"concordance_error_bound"})


def assert_same_json(a, b, *, rtol=1e-9, path="", skip=(), atol=1e-12):
    """Equal structures, numbers within ``rtol`` (or ``atol``: a statistic that is a small
    difference of two log-likelihoods carries their rounding); None matches None only; ``b``
    may have the ``DATABASE_ONLY_KEYS`` besides."""
    if path in skip:
        return
    same = {"rtol": rtol, "skip": skip, "atol": atol}
    if isinstance(a, dict):
        assert isinstance(b, dict), path
        assert set(a) == set(b) - DATABASE_ONLY_KEYS, (path, set(a) ^ set(b))
        for key in a:
            assert_same_json(a[key], b[key], path=f"{path}.{key}", **same)
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), (path, a, b)
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            assert_same_json(x, y, path=f"{path}[{i}]", **same)
    elif isinstance(a, bool) or a is None or isinstance(a, str):
        assert a == b, (path, a, b)
    elif isinstance(a, int | float):
        assert isinstance(b, int | float) and not isinstance(b, bool), (path, a, b)
        assert math.isclose(a, b, rel_tol=rtol, abs_tol=atol), (path, a, b)
    else:
        assert a == b, (path, a, b)


def with_ward_terms(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with a numeric and a categorical covariate that each take one value per ward
    (the strata), so a stratified model cannot estimate them (with two wards they are
    collinear, so each case uses one)."""
    out = frame.copy()
    out["ward_beds"] = out["ward"].map({"A": 12.0, "B": 30.0})
    out["wing"] = out["ward"].map({"A": "left", "B": "right"})
    return out


# Terms constant within every stratum: left out with a warning; when all are, no model.
NOT_ESTIMABLE_ROLES = Roles(
    time="days",
    event="status",
    covariates=("age", "ward_beds", "stage"),
    categorical=("stage",),
    strata="ward",
    entry="enrolled",
)
NONE_ESTIMABLE_ROLES = Roles(
    time="days", event="status", covariates=("wing",), categorical=("wing",), strata="ward"
)


def dated_frame(seed: int = 0, n: int = 800, *, text: bool = True) -> pd.DataFrame:
    """Start and end dates (ISO text, or native timestamps with ``text=False``) with rows that
    meet every date exclusion reason: missing, unparseable, implausible (before 1900 or in the
    future) and end before start; the text kind adds times of day, offsets, fractions of a
    second and placeholder years that only the Python date parser reads."""
    rng = np.random.default_rng(seed)
    start = np.datetime64("2015-01-01T00:00:00") + rng.integers(0, 5 * 365 * 86400, n).astype(
        "timedelta64[s]"
    )
    length = np.ceil(rng.exponential(400, n)).astype("timedelta64[D]")
    end = start + length
    if not text:
        end = end + rng.integers(0, 86400, n).astype("timedelta64[s]")
    picks = rng.permutation(n)
    frame = pd.DataFrame(
        {
            "start": pd.Series(start.astype("datetime64[ns]")),
            "end": pd.Series(end.astype("datetime64[ns]")),
            "status": rng.choice(["dead", "alive"], n, p=[0.6, 0.4]).astype(object),
            "arm": rng.choice(["x", "y"], n).astype(object),
            "age": np.round(rng.normal(60, 8, n), 1),
        }
    )
    frame.loc[picks[:8], "start"] = pd.NaT  # missing time
    frame.loc[picks[8:14], "start"] = pd.Timestamp("1899-03-04")  # implausible
    frame.loc[picks[14:18], "end"] = pd.Timestamp("2199-07-01")  # implausible (future)
    swap = picks[18:30]  # end before start
    frame.loc[swap, ["start", "end"]] = frame.loc[swap, ["end", "start"]].to_numpy()
    if not text:
        return frame
    days = frame["start"].dt.strftime("%Y-%m-%d").astype(object)
    frame["start"] = days.where(frame["start"].notna(), None)
    frame["end"] = frame["end"].dt.strftime("%Y-%m-%d %H:%M").astype(object)
    odd = {
        30: ("start", "not recorded"),  # unparseable
        31: ("start", "2021-02-30"),  # unparseable (no such day)
        32: ("end", "2019-13-01"),  # unparseable (no such month)
        33: ("end", "2021-06-01T10:30:15"),
        34: ("end", "2021-06-01 10:30:15.75"),  # fraction: the Python path
        35: ("end", "2021-06-01T23:30:00+02:00"),  # offset: the Python path
        36: ("start", "0001-01-01"),  # placeholder year: implausible
        37: ("end", "9999-12-31"),  # placeholder year: implausible
        38: ("start", " 2016-02-29 "),  # spaces; a leap day
        39: ("end", "2020-01-05T24:00"),  # no such hour
    }
    for at, (column, value) in odd.items():
        frame.loc[picks[at], column] = value
    return frame


DATE_ROLES = Roles(
    start="start",
    end="end",
    event="status",
    group="arm",
    covariates=("age",),
    unit="months",
)


def competing_frame(seed: int = 0, n: int = 1500, *, continuous: bool = False) -> pd.DataFrame:
    """``messy_frame`` with three named causes in the status column ("dead", "relapse",
    "moved"; "alive" censored); with ``continuous`` the times and the age are not rounded, so
    there are no tied times and (almost) every linear predictor is distinct."""
    rng = np.random.default_rng(seed + 1000)
    frame = messy_frame(seed, n)
    if continuous:
        frame["days"] = frame["days"] - rng.random(n)  # no ties; negatives and NaN stay so
        frame["age"] = frame["age"] + rng.normal(0, 0.05, n)
    status = frame["status"].to_numpy(dtype=object)
    dead = status == "dead"
    status[dead] = rng.choice(["dead", "relapse", "moved"], int(dead.sum()), p=[0.5, 0.3, 0.2])
    frame["status"] = status
    return frame


COMPETING_ROLES = replace(
    ROLES, event_causes=(("dead", "death"), ("relapse", "relapse"), ("moved", "moved"))
)

COMPETING_SETTINGS = {
    **SETTINGS,
    "competing": {"times": [100.0, 365.0], "fine_gray": "death"},
}


# Texts a SQL literal must carry through unchanged: quotes, backslashes (an escape in Spark's
# literals), a line break, non-ASCII letters.
AWKWARD_TEXTS = ("o'brien", "north\\east", "\\", "x\\\\y'z", "line\nbreak", "Zürich–Ost", "")


def awkward_frame(seed: int = 4, n: int = 600) -> pd.DataFrame:
    """messy_frame with site levels holding quotes and backslashes, and a filter on them."""
    frame = messy_frame(seed, n)
    rng = np.random.default_rng(seed)
    frame["site"] = rng.choice(["o'brien", "north\\east", "a\\nb"], n).astype(object)
    return frame


AWKWARD_FILTERS = (RowFilter("site", "in", ("o'brien", "north\\east")),)


def awkward_names(seed: int = 5, n: int = 600) -> tuple[pd.DataFrame, Roles]:
    """messy_frame with column names holding quotes, a backtick, backslashes and non-ASCII
    letters, and the roles naming them."""
    names = {"days": 'days "to"\\event', "site": "site's `name`", "age": "âge\\n"}
    frame = messy_frame(seed, n).rename(columns=names)
    roles = replace(
        ROLES, time=names["days"], group=names["site"], covariates=(names["age"], "stage")
    )
    return frame, roles


ID_ROLES = replace(ROLES, id="pid")


def id_frame(seed: int = 6, n: int = 900, *, repeats: bool = True) -> pd.DataFrame:
    """messy_frame with a subject id: several rows for some subjects (episodes, with the
    entry times of the roles, some overlapping), or one each; a few rows without an id."""
    frame = messy_frame(seed, n)
    rng = np.random.default_rng(seed)
    ids = rng.integers(0, int(n * 0.7), n) if repeats else rng.permutation(n) + 1000
    frame["pid"] = ids.astype(float)
    frame.loc[rng.choice(n, 12, replace=False), "pid"] = np.nan
    return frame


def assert_awkward_texts_unchanged(open_source, frame: pd.DataFrame, skip) -> None:
    """Every ``AWKWARD_TEXTS`` literal reads back unchanged from a source ``open_source()``
    opens on ``frame``, and the analysis with ``AWKWARD_FILTERS`` equals memory's."""
    source = open_source()
    try:
        for text in AWKWARD_TEXTS:
            assert source.query(f"SELECT {literal(text)} AS v")["v"].iloc[0] == text
    finally:
        source.close()
    memory = memory_json(frame, ROLES, filters=AWKWARD_FILTERS)
    database = aggregate_json(open_source(), ROLES, filters=AWKWARD_FILTERS)
    assert [c["group"] for c in database["curves"]] == [c["group"] for c in memory["curves"]]
    assert database["filters"] == memory["filters"]
    assert_same_json(memory, database, skip=skip)


def boolean_frame(seed: int = 7, n: int = 900) -> pd.DataFrame:
    """``messy_frame`` with true/false columns: the event (``died``, some missing), the group
    (``treated``) and the strata (``night``, some missing), a normal coding of each."""
    rng = np.random.default_rng(seed)
    frame = messy_frame(seed, n).drop(columns=["status"])
    died = pd.Series(rng.random(n) < 0.6, dtype=object)
    died[rng.permutation(n)[:12]] = None
    frame["died"] = died
    frame["treated"] = rng.random(n) < 0.5
    night = pd.Series(rng.random(n) < 0.3, dtype=object)
    night[rng.permutation(n)[:9]] = None
    frame["night"] = night
    return frame


BOOLEAN_ROLES = replace(ROLES, event="died", group="treated", strata="night")


class Stopped(BaseException):
    """A stop of the run, raised as the app's ``SqlSource.wait`` hook raises Streamlit's."""


def assert_a_stop_ends_the_read(source, slow_sql: str, running=None) -> None:
    """``source.wait`` raising after 0.5 s ends ``slow_sql`` (which would run far longer) within
    10 s; ``running()``, how many sessions run it, is 1 meanwhile and 0 after. The source reads
    again afterwards. The source is closed."""
    import time

    import pytest

    started = time.monotonic()

    def wait():
        if time.monotonic() - started > 0.5:
            if running is not None:
                assert running() == 1  # the statement runs until the stop
            raise Stopped

    source.wait = wait
    try:
        with pytest.raises(Stopped):
            source.query(slow_sql)
        assert time.monotonic() - started < 10
        if running is not None:
            assert running() == 0
        source.wait = None
        assert source.query("SELECT 1 AS one")["one"][0] == 1
    finally:
        source.close()
