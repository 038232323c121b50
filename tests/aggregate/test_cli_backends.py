"""``analyze --backend``: DuckDB on a file and on a partitioned folder gives memory's numbers;
``computed_with`` says which backend ran; bad combinations exit 2 with one ``error:`` line."""

from __future__ import annotations

import json

import pytest

from app.cli import main
from tests.aggregate.cases import assert_same_json, competing_frame, messy_frame

ROLE_ARGS = [
    "--time", "days", "--event", "status", "--group", "site", "--strata", "ward",
    "--entry", "enrolled", "--covariates", "age,stage", "--categorical", "stage",
    "--times", "100,365",
]  # fmt: skip
NOT_FROM_SUMS = (".cox.concordance_se", ".computed_with")  # se: not with delayed entry


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    frame = messy_frame(5, n=900)
    frame.to_parquet(folder / "one.parquet")
    parts = folder / "parts"
    for i, (_ward, piece) in enumerate(frame.groupby("ward", dropna=False)):
        target = parts / f"ward_part={i}"
        target.mkdir(parents=True)
        piece.to_parquet(target / "data.parquet")
    return folder


def analyze(capsys, *args) -> dict:
    code = main(["analyze", *args, *ROLE_ARGS, "--json", "-"])
    out = capsys.readouterr()
    assert code == 0, out.err
    return json.loads(out.out)


def test_duckdb_file_and_folder_equal_memory(data, capsys):
    memory = analyze(capsys, str(data / "one.parquet"), "--backend", "memory")
    file = analyze(capsys, str(data / "one.parquet"), "--backend", "duckdb")
    folder = analyze(capsys, str(data / "parts"))  # auto: a folder goes to DuckDB
    assert memory["computed_with"]["backend"] == "memory"
    assert file["computed_with"]["backend"] == folder["computed_with"]["backend"] == "duckdb"
    assert file["computed_with"]["sample"] is None
    assert list(file) == list(memory)
    for result in (file, folder):
        assert result["data"]["excluded"] == memory["data"]["excluded"]
        assert_same_json(memory, result, skip=NOT_FROM_SUMS)


def test_competing_causes_from_duckdb_equal_memory(tmp_path, capsys):
    path = str(tmp_path / "causes.parquet")
    competing_frame(5, n=900).to_parquet(path)
    causes = ["--competing", "dead=death", "--competing", "relapse=relapse"]
    causes += ["--competing", "moved=moved"]
    memory = analyze(capsys, path, "--backend", "memory", *causes)
    database = analyze(capsys, path, "--backend", "duckdb", *causes)
    assert database["competing"]["causes"] == ["death", "relapse", "moved"]  # as given
    assert database["data"]["competing_events"] == memory["data"]["competing_events"] > 0
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_text_output_names_the_backend(data, capsys):
    code = main(["analyze", str(data / "one.parquet"), "--backend", "duckdb", *ROLE_ARGS])
    out = capsys.readouterr().out
    assert code == 0
    assert "aggregated by duckdb" in out
    assert "Rows read 900" in out


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--backend", "memory", "--query", "SELECT 1"], "need DATA to be a database address"),
        (["--table", "t"], "need DATA to be a database address"),
        (["--backend", "duckdb", "--filter", "site:at_most:50"], "'site'"),
        (["--statement-timeout", "5"], "--statement-timeout applies to a database address"),
    ],
)
def test_bad_backend_options_exit_2(data, capsys, extra, message):
    code = main(["analyze", str(data / "one.parquet"), *ROLE_ARGS, *extra])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2
    assert len(err) == 1 and err[0].startswith("error: ") and message in err[0]


def test_filters_on_duckdb_equal_memory(data, capsys):
    """``--filter`` on a backend: the same rows left out per filter, in the text and the JSON,
    and the same numbers."""
    filters = ["--filter", "age:between:50,75", "--filter", "site:in:north,south"]
    memory = analyze(capsys, str(data / "one.parquet"), "--backend", "memory", *filters)
    folder = analyze(capsys, str(data / "parts"), *filters)
    assert folder["filters"] == memory["filters"]
    assert memory["filters"]["excluded"][0]["rows"] > 0
    assert list(folder) == list(memory)
    assert_same_json(memory, folder, skip=NOT_FROM_SUMS)
    main(["analyze", str(data / "parts"), *ROLE_ARGS, *filters])
    out = capsys.readouterr().out
    removed = memory["filters"]["excluded"][1]["rows"]
    assert f"Filter site is one of 'north', 'south': {removed} row(s) left out" in out


def test_memory_backend_refuses_a_folder(data, capsys):
    code = main(["analyze", str(data / "parts"), "--backend", "memory", *ROLE_ARGS])
    assert code == 2
    assert "--backend duckdb" in capsys.readouterr().err


def test_infinite_times_are_excluded_as_in_memory(tmp_path, capsys):
    """An infinite duration or entry time is its own exclusion reason, counted as in memory."""
    import numpy as np

    frame = messy_frame(9, n=600)
    frame.loc[[3, 4, 5], "days"] = [np.inf, -np.inf, np.inf]
    frame.loc[[7, 8], "enrolled"] = np.inf
    path = tmp_path / "inf.parquet"
    frame.to_parquet(path)
    memory = analyze(capsys, str(path), "--backend", "memory")
    duck = analyze(capsys, str(path), "--backend", "duckdb")
    reasons = dict((e["reason"], e["rows"]) for e in memory["data"]["excluded"])
    assert reasons["time not finite"] >= 4
    assert duck["data"] == memory["data"]
    assert_same_json(memory, duck, skip=NOT_FROM_SUMS)


def test_an_id_column_on_duckdb_takes_the_robust_model_from_a_sample(tmp_path, capsys):
    """``--id`` on a backend: the checks and curves from all rows; the Cox model, whose robust
    variance needs the rows, from the stated sample, as ``computed_with.sample`` says."""
    from tests.aggregate.cases import id_frame

    path = tmp_path / "ids.parquet"
    id_frame().to_parquet(path)
    sample = ["--sample-rows", "500", "--sample-seed", "3"]
    result = analyze(capsys, str(path), "--backend", "duckdb", "--id", "pid", *sample)
    assert result["cox"]["variance"] == "robust" and result["cox"]["n"] < 500
    assert result["computed_with"]["sample"]["sections"] == ["cox"]
    alone = analyze(capsys, str(path), "--backend", "duckdb", "--id", "pid")
    assert "not_computed" in alone["cox"] and alone["curves"] == result["curves"]


@pytest.mark.parametrize("backend", ["memory", "duckdb"])
def test_a_runaway_fit_prints_no_numpy_warnings(tmp_path, backend):
    """Six rows, three events, three parameters: the Newton steps overflow on the way (and are
    halved), which used to print numpy's RuntimeWarnings beside the results."""
    import subprocess
    import sys

    from tests.aggregate.test_differential import drawn_case

    frame, *_ = drawn_case(1448)
    path = tmp_path / "tiny.parquet"
    frame.to_parquet(path)
    command = [
        sys.executable, "-m", "app", "analyze", str(path), "--backend", backend,
        "--time", "days", "--event", "status", "--group", "site", "--covariates", "age,stage",
        "--categorical", "stage", "--strata", "ward", "--entry", "enrolled",
        "--filter", "site:not_in:east", "--json", str(tmp_path / "out.json"),
    ]  # fmt: skip
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    assert done.returncode == 0, done.stderr
    assert done.stderr == ""
    cox = json.loads((tmp_path / "out.json").read_text())["cox"]
    assert any("run off to infinity" in w for w in cox["warnings"])
