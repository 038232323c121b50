"""PostgreSQL runs the checks and the aggregation inside the database, with memory's numbers;
bad addresses, tables and queries exit 2 with one ``error:`` line."""

from __future__ import annotations

import json
from dataclasses import replace

import pytest

from app.cli import main
from engine.aggregate.sources import SourceError, open_postgres
from engine.analysis.run import run_analysis
from engine.prepare.checks import prepare
from tests.aggregate.cases import (
    DATE_ROLES,
    FILTERS,
    ID_ROLES,
    NONE_ESTIMABLE_ROLES,
    NOT_ESTIMABLE_ROLES,
    ROLES,
    SETTINGS,
    aggregate_json,
    assert_awkward_texts_unchanged,
    assert_same_json,
    awkward_frame,
    dated_frame,
    id_frame,
    memory_json,
    messy_frame,
    with_ward_terms,
)
from tests.aggregate.conftest import load_table
from tests.aggregate.test_cli_backends import NOT_FROM_SUMS, ROLE_ARGS


@pytest.fixture(scope="module")
def messy(postgres_url):
    frame = messy_frame(9, n=1200)
    load_table(postgres_url, "messy", frame)
    return frame


def test_postgres_equals_memory(postgres_url, messy):
    memory = run_analysis(prepare(messy, ROLES), SETTINGS)
    database = aggregate_json(open_postgres(postgres_url, table="messy"), ROLES)
    assert database["data"] == memory["data"]
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_query_and_cli(postgres_url, messy, capsys):
    code = main(
        [
            "analyze",
            postgres_url,
            "--query",
            "SELECT * FROM messy WHERE ward = 'A'",
            *ROLE_ARGS,
            "--json",
            "-",
        ]
    )
    out = capsys.readouterr()
    assert code == 0, out.err
    result = json.loads(out.out)
    assert result["computed_with"]["backend"] == "postgresql"
    assert "hazel@" not in out.out  # the user name is not written
    memory = run_analysis(
        prepare(messy[messy["ward"] == "A"].reset_index(drop=True), ROLES),
        {"curves": {"times": [100.0, 365.0]}},
    )
    assert result["data"]["rows_read"] == memory["data"]["rows_read"]
    assert_same_json(memory["curves"], result["curves"])


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--table", "no_such_table"], "no_such_table"),
        (["--query", "DELETE FROM messy"], "must only read"),
        (["--query", "SELECT 1; DROP TABLE messy"], "must only read"),
        ([], "exactly one of --table"),
    ],
)
def test_bad_database_input_exits_2(postgres_url, messy, capsys, extra, message):
    code = main(["analyze", postgres_url, *extra, *ROLE_ARGS])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2
    assert len(err) == 1 and err[0].startswith("error: ") and message in err[0], err


def test_unreachable_server_is_one_clear_error():
    with pytest.raises(SourceError, match="Could not connect"):
        open_postgres("postgresql://nobody@127.0.0.1:1/none", table="t")


@pytest.mark.parametrize("roles", [NOT_ESTIMABLE_ROLES, NONE_ESTIMABLE_ROLES])
def test_terms_constant_within_strata(postgres_url, roles):
    frame = with_ward_terms(messy_frame(5, n=900))
    load_table(postgres_url, "wards", frame)
    memory = run_analysis(prepare(frame, roles), SETTINGS)
    database = aggregate_json(open_postgres(postgres_url, table="wards"), roles)
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)
    assert ("not_computed" in memory["cox"]) == (roles is NONE_ESTIMABLE_ROLES)


@pytest.mark.parametrize("kind", ["iso-text", "native", "zoned"])
def test_dates_equal_memory(postgres_url, kind):
    frame = dated_frame(8, n=600, text=kind == "iso-text")
    if kind == "zoned":
        for column in ("start", "end"):
            frame[column] = frame[column].dt.tz_localize(
                "America/Sao_Paulo", ambiguous="NaT", nonexistent="NaT"
            )
    load_table(postgres_url, "dated", frame)
    roles = replace(DATE_ROLES, implausible_dates="exclude" if kind == "native" else "warn")
    memory = run_analysis(prepare(frame, roles), SETTINGS)
    database = aggregate_json(open_postgres(postgres_url, table="dated"), roles)
    assert database["data"] == memory["data"]
    assert "end before start" in {e["reason"] for e in memory["data"]["excluded"]}
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_row_filters_equal_memory(postgres_url, messy):
    memory = memory_json(messy, ROLES, filters=FILTERS)
    database = aggregate_json(open_postgres(postgres_url, table="messy"), ROLES, filters=FILTERS)
    assert database["filters"] == memory["filters"]
    assert database["data"] == memory["data"]
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_texts_with_quotes_and_backslashes_reach_the_database_unchanged(postgres_url):
    frame = awkward_frame()
    load_table(postgres_url, "awkward", frame)
    assert_awkward_texts_unchanged(
        lambda: open_postgres(postgres_url, table="awkward"), frame, NOT_FROM_SUMS
    )


def test_an_id_column_gives_memory_checks(postgres_url):
    """Episode notes and the model's choice of variance from the database equal memory's."""
    frame = id_frame()
    load_table(postgres_url, "ids", frame)
    memory = memory_json(frame, ID_ROLES)
    database = aggregate_json(open_postgres(postgres_url, table="ids"), ID_ROLES)
    assert database["data"] == memory["data"]
    assert "'pid' repeats" in database["cox"]["not_computed"]
    assert_same_json(memory, database, skip=(*NOT_FROM_SUMS, ".cox"))
