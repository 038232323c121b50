"""One family of hostile values per case: memory and DuckDB read the same file by the same rules
(an exact property: the same JSON, numbers to 1e-9). Each case writes its own file; the check
of the rule itself (which reason, which value) is beside it, so a case where both sides are
wrong in the same way fails too."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from engine.aggregate.sources import open_duckdb
from engine.io.tables import ImportOptions, read_table
from engine.prepare.roles import Roles
from tests.aggregate.cases import aggregate_json, assert_same_json, memory_json
from tests.aggregate.test_cli_backends import NOT_FROM_SUMS

N = 40
SETTINGS = {"curves": {"times": [10.0]}, "cox": {"ties": "efron"}}


def _base(seed: int = 1, n: int = N) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "t": rng.integers(1, 100, n).astype(float),
            "e": rng.integers(0, 2, n),
            "g": rng.choice(["a2", "a10", "b"], n).astype(object),
            "x": np.round(rng.normal(0, 1, n), 2),
        }
    )


def _text_times(cells: dict) -> pd.DataFrame:
    frame = _base()
    times = frame["t"].map(lambda v: f"{v:g}").astype(object)
    for at, cell in cells.items():
        times[at] = cell
    frame["t"] = times
    return frame


def underscore_time(path):
    """``1_000`` is no number (DuckDB's cast reads digit separators)."""
    _text_times({0: "1_000", 1: "nan"}).to_csv(path / "f.csv", index=False)
    expected = {"missing time": 1, "non-numeric time": 1}  # "nan" is a missing-value token
    return "f.csv", Roles(time="t", event="e", group="g"), expected


def beyond_double_time(path):
    """``1e400`` in a text column is a number beyond the double range: infinite, a time not
    finite (pandas' to_numeric called it text)."""
    _text_times({0: "1e400", 1: "soon"}).to_csv(path / "f.csv", index=False)
    expected = {"non-numeric time": 1, "time not finite": 1}
    return "f.csv", Roles(time="t", event="e", group="g"), expected


def bare_apostrophe(path):
    """A cell of a single ' is text, not the start of a quoted field (DuckDB's sniffer took
    it for a quote and merged three lines into one)."""
    frame = _base()
    frame.loc[[3, 6], "g"] = "'"
    frame.to_csv(path / "f.csv", index=False, quoting=3)
    return "f.csv", Roles(time="t", event="e", group="g"), {}


def overflowing_unit(path):
    """1e308 years is beyond the double range in days: not finite after the conversion."""
    _text_times({0: "1e308"}).to_csv(path / "f.csv", index=False)
    roles = Roles(time="t", event="e", group="g", source_unit="years", unit="days")
    return "f.csv", roles, {"time not finite": 1}


def duration_column(path):
    """A Parquet duration[ns] time column is its span in the time unit (DuckDB read its
    nanoseconds as days; memory refused it)."""
    frame = _base()
    frame["t"] = pd.to_timedelta(frame["t"], unit="D")
    frame.loc[0, "t"] = pd.NaT
    frame.to_parquet(path / "f.parquet")
    roles = Roles(time="t", event="e", group="g", source_unit="weeks", unit="months")
    return "f.parquet", roles, {"missing time": 1}


def infinite_covariate(path):
    """Covariate cells of inf and 1e400 are missing, with one note (DuckDB crashed)."""
    frame = _base()
    x = frame["x"].astype(object)
    x[0], x[1], x[2] = "inf", "1e400", "-inf"
    frame["x"] = x
    frame.to_csv(path / "f.csv", index=False)
    return "f.csv", Roles(time="t", event="e", group="g", covariates=("x",)), {}


def missing_event_cox(path):
    """A Cox model whose rows include a missing event."""
    frame = _base()
    frame["e"] = frame["e"].astype(float)
    frame.loc[[0, 5], "e"] = np.nan
    frame.to_parquet(path / "f.parquet")
    return "f.parquet", Roles(time="t", event="e", covariates=("x",)), {"missing event": 2}


def one_row_float16(path):
    """A one-row Parquet file whose float16 covariate is missing (DuckDB crashed)."""
    frame = _base(n=1)
    frame["x"] = pd.Series([np.nan], dtype="float16")
    frame.to_parquet(path / "f.parquet")
    return "f.parquet", Roles(time="t", event="e", covariates=("x",)), {}


def levels_equal_but_for_case(path):
    """Levels equal in natural order but for case or leading zeros come in one order on every
    backend (memory's was the rows' order, DuckDB's its GROUP BY's)."""
    rng = np.random.default_rng(2)
    frame = _base(n=80)
    frame["g"] = rng.choice(["b", "B", "a", "A", "1", "01", "x"], 80).astype(object)
    frame.to_parquet(path / "f.parquet")
    return "f.parquet", Roles(time="t", event="e", group="g"), {}


def event_values_tied(path):
    """Censored event values of equal counts are listed in natural order on both."""
    frame = _base()
    frame["e"] = np.array(["d", "r", "", "q"] * (N // 4), dtype=object)
    frame.loc[0, "e"] = None
    frame.to_parquet(path / "f.parquet")
    roles = Roles(time="t", event="e", event_causes=(("r", "relapse"),))
    return "f.parquet", roles, {"missing event": 1}


FAMILIES = (
    underscore_time,
    beyond_double_time,
    bare_apostrophe,
    overflowing_unit,
    duration_column,
    infinite_covariate,
    missing_event_cox,
    one_row_float16,
    levels_equal_but_for_case,
    event_values_tied,
)


@pytest.mark.parametrize("family", FAMILIES, ids=lambda f: f.__name__)
def test_memory_and_duckdb_read_a_hostile_file_alike(tmp_path, family):
    name, roles, excluded = family(tmp_path)
    path = tmp_path / name
    imported = read_table(path, ImportOptions())
    memory = memory_json(imported.frame, roles, SETTINGS)
    database = aggregate_json(open_duckdb(path), roles, SETTINGS)
    assert dict((e["reason"], e["rows"]) for e in memory["data"]["excluded"]) == excluded
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_the_rules_read_as_they_should(tmp_path):
    """What each family is, beyond both sides agreeing."""
    name, roles, _ = duration_column(tmp_path)
    frame = read_table(tmp_path / name, ImportOptions()).frame
    memory = memory_json(frame, roles, SETTINGS)
    assert memory["data"]["rows_used"] == N - 1  # every span read, in weeks, shown in months
    name, roles, _ = bare_apostrophe(tmp_path)
    database = aggregate_json(open_duckdb(tmp_path / name), roles, SETTINGS)
    assert database["data"]["rows_read"] == N
    assert "'" in [c["group"] for c in database["curves"]]
    name, roles, _ = infinite_covariate(tmp_path)
    database = aggregate_json(open_duckdb(tmp_path / name), roles, SETTINGS)
    note = next(w for w in database["data"]["warnings"] if "not finite numbers" in w)
    assert "3 cell(s) are not finite numbers (-inf in 1 cell(s), inf in 2 cell(s))" in note
    assert database["cox"]["n"] == N - 3
    name, roles, _ = levels_equal_but_for_case(tmp_path)
    database = aggregate_json(open_duckdb(tmp_path / name), roles, SETTINGS)
    groups = [c["group"] for c in database["curves"] if c["group"] is not None]
    assert groups[-7:] == ["01", "1", "A", "a", "B", "b", "x"]


def test_non_finite_numbers_are_literals_not_column_names(tmp_path):
    """A NaN coefficient written into the SQL text read as a column named nan."""
    from engine.aggregate.sql import number

    frame = _base()
    frame.to_parquet(tmp_path / "f.parquet")
    source = open_duckdb(tmp_path / "f.parquet")
    try:
        values = [float("nan"), float("inf"), -float("inf"), 0.1]
        listed = ", ".join(f"{number(v)} * x AS v{i}" for i, v in enumerate(values))
        row = source.query(f"SELECT {listed} FROM {source.relation} WHERE x > 0 LIMIT 1")
        got = row.iloc[0].to_numpy(dtype=float)
        x = float(source.query(f"SELECT x FROM {source.relation} WHERE x > 0 LIMIT 1")["x"][0])
        assert np.isnan(got[0]) and got[1] == np.inf and got[2] == -np.inf and got[3] == 0.1 * x
    finally:
        source.close()
