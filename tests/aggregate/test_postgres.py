"""PostgreSQL runs the checks and the aggregation inside the database, with memory's numbers;
bad addresses, tables and queries exit 2 with one ``error:`` line."""

from __future__ import annotations

import json
import time
from dataclasses import replace

import psycopg
import pytest

from app.cli import main
from engine.aggregate.sources import SourceError, open_postgres
from engine.analysis.run import run_analysis
from engine.prepare.checks import prepare
from tests.aggregate.cases import (
    BOOLEAN_ROLES,
    DATE_ROLES,
    FILTERS,
    ID_ROLES,
    NONE_ESTIMABLE_ROLES,
    NOT_ESTIMABLE_ROLES,
    ROLES,
    SETTINGS,
    aggregate_json,
    assert_a_stop_ends_the_read,
    assert_awkward_texts_unchanged,
    assert_same_json,
    awkward_frame,
    boolean_frame,
    dated_frame,
    id_frame,
    memory_json,
    messy_frame,
    with_ward_terms,
)
from tests.aggregate.conftest import PASSWORD, load_table
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


def test_true_false_event_and_group_columns_give_memory_numbers(postgres_url):
    """A boolean event column (with missing values) and a boolean group are a normal coding:
    PostgreSQL has no MIN(boolean), which the checks' value counts used to ask for."""
    frame = boolean_frame()
    load_table(postgres_url, "booleans", frame)
    memory = memory_json(frame, BOOLEAN_ROLES)
    database = aggregate_json(open_postgres(postgres_url, table="booleans"), BOOLEAN_ROLES)
    assert database["data"] == memory["data"]
    assert memory["data"]["events"] > 0 and memory["data"]["excluded"]
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error: "), err
    return err[0]


@pytest.mark.parametrize(
    ("extra", "said"),
    [
        (["--table", "no_such_table"], "the database has no such table"),
        (["--query", "SELECT * FROM no_such_table"], 'relation "no_such_table" does not exist'),
        (["--query", "SELECT days, status, nothing_here FROM messy"], '"nothing_here"'),
        (["--query", "SELECT *, site FROM messy"], "more than one column named 'site'"),
    ],
)
def test_database_errors_are_one_sentence_without_sql(postgres_url, messy, capsys, extra, said):
    assert main(["analyze", postgres_url, *extra, *ROLE_ARGS]) == 2
    line = _one_error_line(capsys)
    assert said in line, line
    for internal in ("LINE 1", "^", "LIMIT 2000", "hazel_source", "DataFrame", "attribute"):
        assert internal not in line, line


def test_a_wrong_password_is_named(postgres_url, password_url, messy, capsys):
    wrong = password_url.replace("@", ":not-the-password@")
    assert main(["analyze", wrong, "--table", "messy", *ROLE_ARGS]) == 2
    line = _one_error_line(capsys)
    assert "refused the password for the user 'hazel_password'" in line, line
    assert "not-the-password" not in line
    assert main(["analyze", password_url, "--table", "messy", *ROLE_ARGS]) == 2  # none given
    assert "asks for a password and none was given" in _one_error_line(capsys)
    right = password_url.replace("@", f":{PASSWORD}@")
    assert main(["analyze", right, "--table", "messy", *ROLE_ARGS]) == 2  # no read access yet
    line = _one_error_line(capsys)
    assert "may not read it (permission denied for table messy)" in line, line
    with psycopg.connect(postgres_url, autocommit=True) as connection:
        connection.execute("GRANT SELECT ON messy TO hazel_password")
    assert main(["analyze", right, "--table", "messy", *ROLE_ARGS]) == 0, capsys.readouterr().err


def _running(url: str, text: str) -> int:
    """How many other sessions are running a statement containing ``text``."""
    with psycopg.connect(url) as connection:
        return connection.execute(
            "SELECT COUNT(*) FROM pg_stat_activity WHERE state = 'active' AND query LIKE %s "
            "AND pid <> pg_backend_pid()",
            (f"%{text}%",),
        ).fetchone()[0]


def test_the_statement_timeout_stops_a_query_that_would_run_on(postgres_url, messy, capsys):
    query = "SELECT * FROM messy WHERE pg_sleep(30) IS NOT NULL"
    started = time.monotonic()
    code = main(["analyze", postgres_url, "--query", query, "--statement-timeout", "1",
                 *ROLE_ARGS])  # fmt: skip
    assert code == 2 and time.monotonic() - started < 10
    line = _one_error_line(capsys)
    assert "statement timeout of 1 s" in line and "--statement-timeout SECONDS" in line, line
    assert _running(postgres_url, "pg_sleep(30)") == 0


@pytest.mark.parametrize("value", ["-1", "nan", "inf"])
def test_a_bad_statement_timeout_is_refused_by_name(postgres_url, messy, capsys, value):
    code = main(["analyze", postgres_url, "--table", "messy", "--statement-timeout", value,
                 *ROLE_ARGS])  # fmt: skip
    assert code == 2
    assert _one_error_line(capsys).startswith("error: --statement-timeout must be a number")


def test_the_default_statement_timeout_is_set_in_the_session(postgres_url, messy):
    source = open_postgres(postgres_url, table="messy")
    try:
        assert source.query("SHOW statement_timeout")["statement_timeout"][0] == "10min"
    finally:
        source.close()


def test_a_stop_while_reading_cancels_the_statement_in_the_database(postgres_url, messy):
    """The app's stop reaches ``SqlSource.wait``: the running statement is cancelled in the
    server (not left running), the stop is raised, and the connection reads again after."""
    source = open_postgres(postgres_url, table="messy", statement_timeout=0)
    running = lambda: _running(postgres_url, "pg_sleep(31)")  # noqa: E731
    assert_a_stop_ends_the_read(source, "SELECT pg_sleep(31) AS slept", running)
