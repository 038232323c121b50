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
from tests.aggregate.cases import (
    NONE_ESTIMABLE_ROLES,
    NOT_ESTIMABLE_ROLES,
    ROLES,
    SETTINGS,
    assert_same_json,
    messy_frame,
    with_ward_terms,
)

# Harrell's C compares pairs of rows: from per-time sums it is reported as not computed.
NOT_FROM_SUMS = (".cox.concordance", ".cox.concordance_se", ".cox.warnings")


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
    warnings = database["cox"]["warnings"]
    assert warnings[:-1] == memory["cox"]["warnings"]
    assert "Harrell's C was not computed" in warnings[-1]
    assert database["cox"]["concordance"] is None


@pytest.mark.parametrize("roles", [NOT_ESTIMABLE_ROLES, NONE_ESTIMABLE_ROLES])
def test_terms_constant_within_strata(tmp_path, roles):
    path = tmp_path / "wards.parquet"
    with_ward_terms(messy_frame(5, n=900)).to_parquet(path)
    memory, database = both(path, roles)
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)
    if roles is NONE_ESTIMABLE_ROLES:
        assert "single value within each stratum" in memory["cox"]["not_computed"]
    else:
        assert memory["cox"]["not_estimable"] == ["ward_beds"]
        assert database["cox"]["warnings"][:-1] == memory["cox"]["warnings"]
