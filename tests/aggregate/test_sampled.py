"""Sections that per-time sums cannot give, computed on a stated random sample of the rows:
the sample is the same for the same seed, exactly N rows of the source, and the sections
taken from it equal the row-level engine on those very rows; every other section still comes
from all rows, and ``computed_with.sample`` names the sample and the sections."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from app.cli import main
from engine.aggregate.sources import open_duckdb, open_postgres
from engine.analysis.run import run_analysis
from engine.prepare.checks import prepare
from tests.aggregate.cases import messy_frame
from tests.aggregate.conftest import load_table

ROLE_ARGS = [
    "--time", "days", "--event", "status", "--group", "site",
    "--covariates", "age,stage", "--categorical", "stage",
]  # fmt: skip


@pytest.fixture(scope="module")
def parquet(tmp_path_factory):
    frame = messy_frame(3, n=1200)
    path = tmp_path_factory.mktemp("sampled") / "cohort.parquet"
    frame.to_parquet(path)
    return path, frame


def analyze(capsys, *args) -> dict:
    code = main(["analyze", *args, "--json", "-"])
    out = capsys.readouterr()
    assert code == 0, out.err
    return json.loads(out.out)


def rows_key(frame: pd.DataFrame) -> list:
    return sorted(map(repr, frame.astype(str).itertuples(index=False, name=None)))


def test_the_sample_is_seeded_and_exact_in_size(parquet):
    path, frame = parquet
    source = open_duckdb(path)
    try:
        first = source.random_sample(300, 7)
        again = source.random_sample(300, 7)
        other = source.random_sample(300, 8)
        everything = source.random_sample(5000, 7)
    finally:
        source.close()
    assert len(first) == 300 and rows_key(first) == rows_key(again)
    assert rows_key(first) != rows_key(other)
    assert rows_key(everything) == rows_key(frame)  # asking for more rows gives every row
    assert set(rows_key(first)) <= set(rows_key(frame))


def test_sections_from_the_sample_equal_the_engine_on_those_rows(parquet, capsys):
    path, _ = parquet
    result = analyze(capsys, str(path), "--backend", "duckdb", *ROLE_ARGS,
                     "--spline", "age:3", "--parametric", "--sample-rows", "500",
                     "--sample-seed", "11")  # fmt: skip
    record = result["computed_with"]["sample"]
    assert record == {"rows": 500, "seed": 11, "sections": ["cox.splines", "parametric"]}
    source = open_duckdb(path)
    try:
        rows = source.random_sample(500, 11)
    finally:
        source.close()
    roles, settings = _roles_and_settings()
    engine = run_analysis(prepare(rows, roles), settings, rows)
    assert result["parametric"] == json.loads(json.dumps(engine["parametric"]))
    assert result["cox"]["splines"] == json.loads(json.dumps(engine["cox"]["splines"]))
    # the rest comes from all rows: the data report counts every row read
    assert result["data"]["rows_read"] == 1200


def _roles_and_settings():
    """The roles and settings the command line used (its own readers of the same options)."""
    from app.cli import build_parser, roles_from_args, settings_from_args

    args = build_parser().parse_args(
        ["analyze", "x.parquet", *ROLE_ARGS, "--spline", "age:3", "--parametric"]
    )
    return roles_from_args(args), settings_from_args(args)


def test_without_a_sample_nothing_is_taken_from_one(parquet, capsys):
    path, _ = parquet
    result = analyze(capsys, str(path), "--backend", "duckdb", *ROLE_ARGS, "--parametric")
    assert result["computed_with"]["sample"] is None
    assert "not_computed" in result["parametric"]


def test_sample_options_outside_a_backend_exit_2(parquet, capsys):
    path, _ = parquet
    code = main(["analyze", str(path), "--backend", "memory", *ROLE_ARGS, "--sample-rows", "50"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("error:") == 1 and "--sample-rows" in err
    code = main(["analyze", str(path), "--backend", "duckdb", *ROLE_ARGS, "--sample-rows", "5"])
    assert code == 2


def test_postgres_sample_is_seeded(parquet, postgres_url):
    _, frame = parquet
    load_table(postgres_url, "sampled", frame)
    source = open_postgres(postgres_url, table="sampled")
    try:
        first, again = source.random_sample(200, 3), source.random_sample(200, 3)
    finally:
        source.close()
    assert len(first) == 200 and rows_key(first) == rows_key(again)
