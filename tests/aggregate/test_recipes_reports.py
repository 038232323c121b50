"""Recipes and reports with rows aggregated where they are: a recipe made on the rows in
memory replays on DuckDB and PostgreSQL with the same numbers (to 1e-9, as every backend is
checked against memory), the report records the backend and the source, and no user name or
password reaches a report, the JSON or the text output."""

from __future__ import annotations

import hashlib
import json

import pytest

from app.cli import main
from engine.analysis.recipe import make_recipe
from engine.analysis.run import ANALYSIS_DEFAULTS
from engine.io.tables import read_table
from engine.prepare.filters import RowFilter
from tests.aggregate.cases import ROLES, SETTINGS, assert_same_json, messy_frame
from tests.aggregate.conftest import load_table

NOT_FROM_SUMS = (".cox.concordance", ".cox.concordance_se", ".cox.warnings", ".computed_with")


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """A Parquet file and the recipe the app would save for it (roles and settings)."""
    folder = tmp_path_factory.mktemp("recipes")
    frame = messy_frame(9, n=800)
    path = folder / "cohort.parquet"
    frame.to_parquet(path)
    imported = read_table(path)
    analyses = {name: {**ANALYSIS_DEFAULTS[name], **SETTINGS.get(name, {})} for name in SETTINGS}
    recipe = make_recipe(imported, ROLES, analyses)
    (folder / "recipe.json").write_text(recipe.to_json())
    filtered = make_recipe(imported, ROLES, analyses, filters=(RowFilter("age", "not_missing"),))
    (folder / "filtered.json").write_text(filtered.to_json())
    return folder, frame


def run(capsys, *args):
    code = main(list(args))
    out = capsys.readouterr()
    return code, out.out, out.err


def replay(capsys, data, recipe, *more) -> tuple[dict, str]:
    code, out, err = run(
        capsys, "analyze", str(data), "--recipe", str(recipe), *more, "--json", "-"
    )
    assert code == 0, err
    return json.loads(out), err


def test_recipe_replays_on_duckdb_with_memorys_numbers(made, capsys):
    folder, _ = made
    memory, memory_err = replay(
        capsys, folder / "cohort.parquet", folder / "recipe.json", "--backend", "memory"
    )
    duck, duck_err = replay(
        capsys, folder / "cohort.parquet", folder / "recipe.json", "--backend", "duckdb"
    )
    assert duck["computed_with"]["backend"] == "duckdb"
    assert memory_err == duck_err == ""  # the same file: no fingerprint warning on either
    assert duck["data"] == memory["data"]
    assert_same_json(memory, duck, skip=NOT_FROM_SUMS)


def test_recipe_with_row_filters_replays_on_a_backend(made, capsys, tmp_path):
    """A recipe's row filters run inside DuckDB: memory's numbers, the rows each filter left
    out in the JSON and the report, and no fingerprint warning (the rows before the filters)."""
    folder, frame = made
    data, recipe = folder / "cohort.parquet", folder / "filtered.json"
    memory, _ = replay(capsys, data, recipe, "--backend", "memory")
    duck, err = replay(capsys, data, recipe, "--backend", "duckdb")
    assert err == ""
    removed = int(frame["age"].isna().sum())
    assert duck["filters"] == memory["filters"]
    assert duck["filters"]["excluded"][0]["rows"] == removed > 0
    assert_same_json(memory, duck, skip=NOT_FROM_SUMS)
    report = tmp_path / "report.html"
    code, _, err = run(capsys, "analyze", str(data), "--recipe", str(recipe), "--backend",
                       "duckdb", "--report", str(report))  # fmt: skip
    assert code == 0, err
    assert "age not missing" in report.read_text()


def test_recipe_refuses_role_options_on_a_backend(made, capsys):
    folder, _ = made
    code, _, err = run(
        capsys,
        "analyze",
        str(folder / "cohort.parquet"),
        "--recipe",
        str(folder / "recipe.json"),
        "--backend",
        "duckdb",
        "--time",
        "days",
    )
    assert code == 2 and "--recipe brings its own" in err


def test_recipe_on_another_file_warns_on_duckdb(made, capsys, tmp_path):
    folder, frame = made
    other = tmp_path / "cohort.parquet"
    frame.iloc[:-5].to_parquet(other)
    _, err = replay(capsys, other, folder / "recipe.json", "--backend", "duckdb")
    assert "SHA-256" in err and "800 rows; this file has 795 rows" in err


def test_report_from_duckdb_records_backend_and_file(made, capsys, tmp_path):
    folder, _ = made
    data = folder / "cohort.parquet"
    report = tmp_path / "report.html"
    code, _, err = run(
        capsys,
        "analyze",
        str(data),
        "--recipe",
        str(folder / "recipe.json"),
        "--backend",
        "duckdb",
        "--report",
        str(report),
    )
    assert code == 0, err
    html = report.read_text()
    assert "Computed by DuckDB" in html
    assert hashlib.sha256(data.read_bytes()).hexdigest() in html
    assert "Subjects still at risk" in html  # the curve figure with its numbers at risk
    assert "800 rows and" in html


def test_postgres_replay_and_report_keep_no_credentials(made, capsys, tmp_path, postgres_url):
    folder, frame = made
    load_table(postgres_url, "cohort", frame)
    # the throwaway server trusts local connections, so any password is accepted: it must
    # still appear nowhere
    with_password = postgres_url.replace("hazel@", "hazel:s3cret-Pa55@")
    memory, _ = replay(
        capsys, folder / "cohort.parquet", folder / "recipe.json", "--backend", "memory"
    )
    report = tmp_path / "report.html"
    code, out, err = run(
        capsys,
        "analyze",
        with_password,
        "--table",
        "cohort",
        "--recipe",
        str(folder / "recipe.json"),
        "--report",
        str(report),
        "--json",
        "-",
    )
    assert code == 0, err
    database = json.loads(out)
    assert database["computed_with"]["backend"] == "postgresql"
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)
    html = report.read_text()
    assert "inside PostgreSQL" in html and "Source 127.0.0.1:" in html
    for text in (html, out, err):
        assert "s3cret" not in text and "hazel:" not in text
