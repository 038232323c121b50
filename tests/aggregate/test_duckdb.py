"""DuckDB gives the same analysis as memory: data checks (every exclusion reason, the same
texts), curves, the comparison and the Cox model with its PH test, to 1e-9."""

from __future__ import annotations

import pytest

from engine.aggregate.analysis import run_aggregate_analysis
from engine.aggregate.sources import open_duckdb
from engine.aggregate.sql_checks import aggregate_checks
from engine.analysis import run_analysis
from engine.checks import prepare
from engine.io import read_table
from tests.aggregate.cases import ROLES, SETTINGS, assert_same_json, messy_frame

# With delayed entry the standard error of Harrell's C is not computed from counts.
NOT_FROM_SUMS = (".cox.concordance_se",)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("duckdb")
    frame = messy_frame(3)
    parquet = folder / "messy.parquet"
    frame.to_parquet(parquet)
    csv = folder / "messy.csv"
    frame.to_csv(csv, index=False)
    return {"parquet": parquet, "csv": csv}


def both(path, roles=ROLES, settings=SETTINGS):
    table = read_table(path)
    prepared = prepare(table.frame, roles)
    memory = run_analysis(prepared, settings)
    source = open_duckdb(path)
    try:
        data = aggregate_checks(source, roles)
        database = run_aggregate_analysis(data, settings)
    finally:
        source.close()
    return memory, database


@pytest.mark.parametrize("kind", ["parquet", "csv"])
def test_duckdb_equals_memory(files, kind):
    memory, database = both(files[kind])
    assert memory["data"] == database["data"]
    data = database["data"]
    assert data["rows_used"] + sum(e["rows"] for e in data["excluded"]) == data["rows_read"]
    assert {e["reason"] for e in data["excluded"]} == {
        "missing time",
        "negative time",
        "missing event",
        "unknown event value",
        "missing entry time",
        "entry not before time",
    }
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)
    # fewer distinct scores than bins: Harrell's C is exact
    assert database["cox"]["concordance_error_bound"] == 0.0
    assert database["cox"]["concordance_se"] is None
