"""Spark where clusters are: the user's settings, shuffle partitions from the data and the
cluster, failures in one sentence, and stderr free of Spark's own progress bars and logs.
The pure rules run without Spark; the command-line runs start Spark once each (slow)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from app.cli import main
from engine.aggregate.sources import (
    SPARK_BYTES_PER_PARTITION,
    SparkSettingError,
    spark_failure,
    spark_settings,
    spark_shuffle_partitions,
)

ROOT = Path(__file__).resolve().parents[2]
# Spark's text on a lost task result (the driver short of memory), as Py4J hands it over
LOST = (
    "An error occurred while calling o412.collectToPython.\n"
    ": org.apache.spark.SparkException: Job aborted due to stage failure: Task 3 in stage 27.0 "
    "failed 1 times, most recent failure: Lost task 3.0 (TID 88) (127.0.0.1 executor driver): "
    "TaskResultLost (result lost from block manager)\n"
    "Driver stacktrace:\n"
    "\tat org.apache.spark.scheduler.DAGScheduler.failJobAndIndependentStages(DAG.scala:2844)\n"
    "\tat scala.collection.mutable.ResizableArray.foreach(ResizableArray.scala:62)\n"
)


def test_settings_are_key_value_pairs_the_last_winning():
    given = ["spark.driver.memory=2g", "spark.executor.cores = 2", "spark.driver.memory=4g"]
    assert spark_settings(given) == {"spark.driver.memory": "4g", "spark.executor.cores": "2"}
    assert spark_settings(["spark.executor.extraJavaOptions=-Da=b"]) == {
        "spark.executor.extraJavaOptions": "-Da=b"
    }


@pytest.mark.parametrize("entry", ["spark.driver.memory", "=4g", "driver.memory=4g", "spark.x="])
def test_a_setting_that_is_not_key_value_is_refused(entry):
    with pytest.raises(SparkSettingError, match="KEY=VALUE"):
        spark_settings([entry])


def test_shuffle_partitions_follow_the_cores_and_the_data():
    assert spark_shuffle_partitions(4, None) == 4  # a remote path: one per core
    assert spark_shuffle_partitions(4, 10 * 1024**2) == 4  # small data: still every core
    assert spark_shuffle_partitions(4, 6 * SPARK_BYTES_PER_PARTITION) == 6
    assert spark_shuffle_partitions(4, 10**12) == 8  # never more than two per core
    assert spark_shuffle_partitions(0, 10**12) == 2
    assert max(spark_shuffle_partitions(c, 10**13) for c in range(1, 65)) < 200


def test_a_lost_task_result_is_one_sentence_naming_driver_memory():
    sentence = spark_failure(Exception(LOST), "visits.parquet")
    assert "\n" not in sentence and "org.apache" not in sentence and "scala" not in sentence
    assert sentence.startswith("Spark lost a step of the work on visits.parquet (")
    assert "TaskResultLost" in sentence and "--spark-conf spark.driver.memory=4g" in sentence
    assert "o412" not in sentence and "DAGScheduler" not in sentence


def test_another_spark_failure_keeps_only_its_first_line():
    text = "org.apache.spark.sql.AnalysisException: [X] no column `w`.\n\tat org.apache.Foo(x)"
    sentence = spark_failure(Exception(text), "v.parquet")
    assert sentence == (
        "The spark query on v.parquet failed: [X] no column `w`. Check the data and the column "
        "roles."
    )


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--spark-conf", "spark.driver.memory=4g"], "apply to --backend spark"),
        (["--spark-driver-host", "10.0.0.5"], "apply to --backend spark"),
        (["--backend", "spark", "--spark-conf", "memory=4g"], "must be KEY=VALUE"),
    ],
)
def test_spark_options_out_of_place_exit_2(tmp_path, capsys, extra, message):
    path = tmp_path / "t.parquet"
    pd.DataFrame({"days": [1.0, 2.0, 3.0], "died": [1, 0, 1]}).to_parquet(path)
    code = main(["analyze", str(path), "--time", "days", "--event", "died", *extra])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and err[0].startswith("error: ") and message in err[0]


def _run(path: Path, *extra: str) -> subprocess.CompletedProcess:
    roles = ["--time", "days", "--event", "died", "--group", "arm", "--covariates", "age"]
    spark = ["--backend", "spark", "--spark-master", "local[1]"]
    return subprocess.run(
        [sys.executable, "-m", "app", "analyze", str(path), *spark, *roles, "--json", "-", *extra],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=400,
    )


@pytest.fixture(scope="module")
def trial(tmp_path_factory, spark_master):  # spark_master: pyspark and Java are there
    rng = np.random.default_rng(21)
    n = 3000
    frame = pd.DataFrame(
        {
            "days": rng.exponential(300, n).round(1),
            "died": rng.integers(0, 2, n),
            "arm": rng.choice(["A", "B", "C"], n),
            "age": rng.normal(60, 9, n).round(1),
        }
    )
    path = tmp_path_factory.mktemp("spark_cli") / "trial.parquet"
    frame.to_parquet(path)
    return path


def test_stderr_carries_no_spark_progress_bars_or_logs(trial):
    done = _run(trial, "--spark-conf", "spark.driver.memory=1g")
    assert done.returncode == 0, done.stderr[-2000:]
    assert "[Stage" not in done.stderr and "WARN" not in done.stderr, done.stderr[-2000:]
    assert done.stderr.strip() == "", done.stderr[-2000:]
    assert '"backend": "spark"' in done.stdout


def test_a_lost_result_is_one_error_line_in_hazels_words(trial):
    done = _run(trial, "--spark-conf", "spark.driver.maxResultSize=1k")
    lines = done.stderr.strip().splitlines()
    assert done.returncode == 2, done.stderr[-2000:]
    assert len(lines) == 1, done.stderr[-3000:]
    assert lines[0].startswith("error: Spark lost a step of the work on trial.parquet")
    assert "spark.driver.memory=4g" in lines[0] and "org.apache" not in lines[0]


def test_a_section_lost_to_a_failed_query_is_said_on_stderr(tmp_path, capsys, monkeypatch):
    """A backend query failing inside one section leaves that section "not computed" and the
    others computed (exit 0), and the sentence is printed on stderr, never only in the JSON."""
    from engine.aggregate import analysis

    def failing_cox(data, cox):
        return data.source.query(f"SELECT no_such_column FROM {data.source.relation}")

    monkeypatch.setattr(analysis, "cox_section", failing_cox)
    path = tmp_path / "t.parquet"
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"days": rng.exponential(9, 60), "died": rng.integers(0, 2, 60)})
    frame["age"] = rng.normal(50, 5, 60)
    frame.to_parquet(path)
    args = ["--time", "days", "--event", "died", "--covariates", "age", "--backend", "duckdb"]
    code = main(["analyze", str(path), *args, "--json", "-"])
    out = capsys.readouterr()
    assert code == 0
    assert "not_computed" in json.loads(out.out)["cox"]
    (line,) = out.err.strip().splitlines()
    assert line.startswith("warning: a section was not computed: The duckdb query on t.parquet")


def test_a_local_session_gets_hazels_settings_and_partitions(spark_master, trial):
    from engine.aggregate.sources import open_spark

    source = open_spark(trial, master=spark_master)
    try:
        conf = source.connection.sparkContext.getConf()
        assert conf.get("spark.ui.showConsoleProgress") == "false"
        assert conf.get("spark.driver.host") == "127.0.0.1"
        cores = source.connection.sparkContext.defaultParallelism
        wanted = spark_shuffle_partitions(cores, trial.stat().st_size)
        assert source.connection.conf.get("spark.sql.shuffle.partitions") == str(wanted) != "200"
    finally:
        source.close()
    given = open_spark(trial, master=spark_master, settings={"spark.sql.shuffle.partitions": "7"})
    try:
        assert given.connection.conf.get("spark.sql.shuffle.partitions") == "7"
    finally:
        given.close()
