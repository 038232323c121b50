"""The README's cluster recipe against a standalone Spark cluster: a master and a worker (1 core,
1 GB) started on 127.0.0.1 from the pyspark install, ``--spark-master spark://127.0.0.1:PORT``;
the JSON must equal DuckDB's on the same file. Under CI=true a missing Java or pyspark fails."""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

from tests.aggregate.cases import assert_same_json, messy_frame
from tests.aggregate.conftest import missing

ROOT = Path(__file__).resolve().parents[2]
START_SECONDS = 90  # the master and the worker are up within this or the test fails
LOGS = ("master.log", "worker.log")
ROLE_ARGS = ["--time", "days", "--event", "status", "--group", "site", "--covariates", "age"]


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _alive_workers(ui_port: int) -> int:
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{ui_port}/json/", timeout=2) as answer:
            return int(json.load(answer).get("aliveworkers", 0))
    except (OSError, ValueError):
        return 0


@pytest.fixture(scope="module")
def standalone_cluster(tmp_path_factory):
    """spark://127.0.0.1:PORT of a master and one worker, stopped at teardown."""
    try:
        import pyspark
    except ImportError:
        missing("pyspark (requirements.txt)")
    if shutil.which("java") is None:
        missing("Java 17 (Debian package openjdk-17-jre-headless)")
    home = Path(pyspark.__file__).parent
    spark_class = home / "bin" / "spark-class"
    if not spark_class.exists():
        missing(f"spark-class in {home}")
    folder = tmp_path_factory.mktemp("cluster")
    env = {**os.environ, "SPARK_HOME": str(home), "SPARK_LOCAL_IP": "127.0.0.1"}
    port, ui, worker_ui = _free_port(), _free_port(), _free_port()
    started = []
    with (folder / "master.log").open("w") as log:
        started.append(
            subprocess.Popen(
                [str(spark_class), "org.apache.spark.deploy.master.Master", "--host",
                 "127.0.0.1", "--port", str(port), "--webui-port", str(ui)],
                env=env, stdout=log, stderr=log,
            )
        )  # fmt: skip
    with (folder / "worker.log").open("w") as log:
        started.append(
            subprocess.Popen(
                [str(spark_class), "org.apache.spark.deploy.worker.Worker", "--host",
                 "127.0.0.1", "--cores", "1", "--memory", "1g", "--webui-port",
                 str(worker_ui), "--work-dir", str(folder / "work"), f"spark://127.0.0.1:{port}"],
                env=env, stdout=log, stderr=log,
            )
        )  # fmt: skip
    try:
        deadline = time.monotonic() + START_SECONDS
        while _alive_workers(ui) < 1:
            if time.monotonic() > deadline or any(p.poll() is not None for p in started):
                logs = "".join((folder / f).read_text()[-1500:] for f in LOGS)
                pytest.fail(f"the standalone Spark master and worker did not start:\n{logs}")
            time.sleep(1)
        yield f"spark://127.0.0.1:{port}"
    finally:
        for process in reversed(started):
            process.terminate()
        for process in started:
            try:
                process.wait(timeout=30)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait(timeout=10)


def _analyze(path: Path, *backend: str) -> dict:
    done = subprocess.run(
        [sys.executable, "-m", "app", "analyze", str(path), *backend, *ROLE_ARGS, "--json", "-"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=480,
    )
    assert done.returncode == 0, done.stderr[-3000:]
    assert done.stderr.strip() == "", done.stderr[-3000:]  # Hazel's lines only: none here
    return json.loads(done.stdout)


def test_the_cluster_recipe_gives_duckdbs_json(standalone_cluster, tmp_path):
    path = tmp_path / "visits.parquet"
    messy_frame(17, n=2000).to_parquet(path)
    duckdb = _analyze(path, "--backend", "duckdb")
    cluster = _analyze(
        path,
        "--backend", "spark", "--spark-master", standalone_cluster,
        "--spark-driver-host", "127.0.0.1",
        "--spark-conf", "spark.executor.memory=512m", "--spark-conf", "spark.driver.memory=1g",
    )  # fmt: skip
    assert cluster["computed_with"]["backend"] == "spark"
    assert duckdb["computed_with"]["backend"] == "duckdb"
    assert list(cluster) == list(duckdb) and list(cluster["cox"]) == list(duckdb["cox"])
    bound = duckdb["cox"].pop("concordance_error_bound")  # both are binned: compared here
    assert cluster["cox"]["concordance_error_bound"] == pytest.approx(bound, rel=1e-9, abs=1e-12)
    assert_same_json(duckdb, cluster, skip=(".computed_with",))
