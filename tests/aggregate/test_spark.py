"""Spark (a local session, started once per test run) gives memory's numbers on a partitioned
Parquet dataset: the data checks, curves, the comparison and the Cox model with its PH test."""

from __future__ import annotations

import json
from dataclasses import replace

import pytest

from app.cli import main
from engine.aggregate.sources import SourceError, open_spark
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
    assert_awkward_texts_unchanged,
    assert_same_json,
    awkward_frame,
    awkward_names,
    boolean_frame,
    dated_frame,
    id_frame,
    memory_json,
    messy_frame,
    with_ward_terms,
)
from tests.aggregate.test_cli_backends import NOT_FROM_SUMS


@pytest.fixture(scope="module")
def dataset(tmp_path_factory):
    folder = tmp_path_factory.mktemp("spark")
    frame = messy_frame(13, n=800)
    frame.to_parquet(folder / "messy.parquet")
    return folder / "messy.parquet", frame


def test_spark_equals_memory(spark_master, dataset):
    path, frame = dataset
    memory = run_analysis(prepare(frame, ROLES), SETTINGS)
    database = aggregate_json(open_spark(path, master=spark_master), ROLES)
    assert database["data"] == memory["data"]
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_cli_spark_backend(spark_master, dataset, capsys):
    path, _ = dataset
    roles = ["--time", "days", "--event", "status", "--group", "site"]
    backend = ["--backend", "spark", "--spark-master", spark_master]
    code = main(["analyze", str(path), *backend, *roles, "--json", "-"])
    out = capsys.readouterr()
    assert code == 0, out.err
    result = json.loads(out.out)
    assert result["computed_with"]["backend"] == "spark"
    assert result["computed_with"]["version"].split(".")[0].isdigit()


def test_missing_path_is_one_clear_error(spark_master, tmp_path):
    with pytest.raises(SourceError, match="does not exist"):
        open_spark(tmp_path / "nothing.parquet", master=spark_master)


@pytest.mark.parametrize("roles", [NOT_ESTIMABLE_ROLES, NONE_ESTIMABLE_ROLES])
def test_terms_constant_within_strata(spark_master, tmp_path, roles):
    frame = with_ward_terms(messy_frame(5, n=600))
    frame.to_parquet(tmp_path / "wards.parquet")
    memory = run_analysis(prepare(frame, roles), SETTINGS)
    database = aggregate_json(open_spark(tmp_path / "wards.parquet", master=spark_master), roles)
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)
    assert ("not_computed" in memory["cox"]) == (roles is NONE_ESTIMABLE_ROLES)


@pytest.mark.parametrize("text", [True, False], ids=["iso-text", "native"])
def test_dates_equal_memory(spark_master, tmp_path, text):
    frame = dated_frame(11, n=500, text=text)
    path = tmp_path / "dated.parquet"
    frame.to_parquet(path, coerce_timestamps="us")  # Spark reads micro-, not nanoseconds
    roles = replace(DATE_ROLES, unit="weeks", implausible_dates="exclude")
    memory = run_analysis(prepare(frame, roles), SETTINGS)
    database = aggregate_json(open_spark(path, master=spark_master), roles)
    assert database["data"] == memory["data"]
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_row_filters_equal_memory(spark_master, dataset):
    path, frame = dataset
    memory = memory_json(frame, ROLES, filters=FILTERS)
    database = aggregate_json(open_spark(path, master=spark_master), ROLES, filters=FILTERS)
    assert database["filters"] == memory["filters"]
    assert database["data"] == memory["data"]
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_texts_with_quotes_and_backslashes_reach_the_database_unchanged(spark_master, tmp_path):
    """Spark reads a backslash in a literal as an escape: the literals are built around it."""
    frame = awkward_frame()
    path = tmp_path / "awkward.parquet"
    frame.to_parquet(path)
    assert_awkward_texts_unchanged(
        lambda: open_spark(path, master=spark_master), frame, NOT_FROM_SUMS
    )


def test_column_names_with_quotes_and_backslashes(spark_master, tmp_path):
    frame, roles = awkward_names()
    path = tmp_path / "names.parquet"
    frame.to_parquet(path)
    memory = memory_json(frame, roles)
    database = aggregate_json(open_spark(path, master=spark_master), roles)
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_an_id_column_gives_memory_checks(spark_master, tmp_path):
    """Episode notes and the model's choice of variance from the database equal memory's."""
    frame = id_frame()
    frame.to_parquet(tmp_path / "ids.parquet")
    memory = memory_json(frame, ID_ROLES)
    database = aggregate_json(open_spark(tmp_path / "ids.parquet", master=spark_master), ID_ROLES)
    assert database["data"] == memory["data"]
    assert "'pid' repeats" in database["cox"]["not_computed"]
    assert_same_json(memory, database, skip=(*NOT_FROM_SUMS, ".cox"))


def test_true_false_event_and_group_columns_give_memory_numbers(spark_master, tmp_path):
    frame = boolean_frame()
    frame.to_parquet(tmp_path / "booleans.parquet")
    memory = memory_json(frame, BOOLEAN_ROLES)
    source = open_spark(tmp_path / "booleans.parquet", master=spark_master)
    database = aggregate_json(source, BOOLEAN_ROLES)
    assert database["data"] == memory["data"]
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)
