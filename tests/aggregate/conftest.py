"""A throwaway PostgreSQL server for the tests: started once per test run on 127.0.0.1 (Debian's
``postgresql`` package, installed by ``.ci/run``), in a temporary folder removed afterwards.
PostgreSQL refuses to run as root, so as root the server runs as the ``postgres`` user.
Under ``CI=true`` a missing server fails the run instead of skipping."""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
from pathlib import Path

import pytest

PASSWORD_USER, PASSWORD = "hazel_password", "Quince-4471"


def _server_binaries() -> Path | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/pg_ctl"))
    return Path(found[-1]).parent if found else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def missing(what: str):
    if os.environ.get("CI") == "true":
        pytest.fail(f"{what} is missing; .ci/run installs it")
    pytest.skip(f"{what} is not installed")


@pytest.fixture(scope="session")
def postgres_url():
    binaries = _server_binaries()
    if binaries is None:
        missing("PostgreSQL (Debian package postgresql)")
    folder = Path(tempfile.mkdtemp(prefix="hazel-pg-"))
    data = folder / "data"
    as_root = os.geteuid() == 0
    prefix = ["runuser", "-u", "postgres", "--"] if as_root else []
    if as_root:
        shutil.chown(folder, "postgres")
    port = _free_port()
    run = lambda *args: subprocess.run(  # noqa: E731
        [*prefix, *args], check=True, capture_output=True, text=True, timeout=120
    )
    try:
        run(str(binaries / "initdb"), "-D", str(data), "-A", "trust", "-U", "hazel", "-E", "UTF8")
        rules = data / "pg_hba.conf"  # the first matching line wins: one user needs a password
        rules.write_text(
            f"host all {PASSWORD_USER} 127.0.0.1/32 scram-sha-256\n{rules.read_text()}"
        )
        options = f"-h 127.0.0.1 -p {port} -k {folder} -c fsync=off"
        run(str(binaries / "pg_ctl"), "-D", str(data), "-o", options, "-w", "-l",
            str(folder / "log"), "start")  # fmt: skip
    except (subprocess.CalledProcessError, OSError) as exc:
        shutil.rmtree(folder, ignore_errors=True)
        detail = getattr(exc, "stderr", "") or str(exc)
        pytest.fail(f"the test PostgreSQL server did not start: {detail}")
    try:
        yield f"postgresql://hazel@127.0.0.1:{port}/postgres"
    finally:
        subprocess.run(
            [*prefix, str(binaries / "pg_ctl"), "-D", str(data), "-m", "fast", "-w", "stop"],
            capture_output=True,
            timeout=120,
        )
        shutil.rmtree(folder, ignore_errors=True)


@pytest.fixture(scope="session")
def password_url(postgres_url):
    """The test server's address for a user who must give a password (``PASSWORD``)."""
    import psycopg

    with psycopg.connect(postgres_url, autocommit=True) as connection:
        connection.execute(f"CREATE ROLE {PASSWORD_USER} LOGIN PASSWORD '{PASSWORD}'")
    return postgres_url.replace("hazel@", f"{PASSWORD_USER}@")


def load_table(url: str, name: str, frame) -> None:
    """Create ``name`` from a pandas frame (text, boolean, double precision and timestamp
    columns, with or without a time zone; NaN, NaT and None as NULL)."""
    import numpy as np
    import pandas as pd
    import psycopg

    from engine.aggregate.sql import quoted

    columns = []
    for column in frame.columns:
        values = frame[column]
        kind = "DOUBLE PRECISION" if pd.api.types.is_numeric_dtype(values) else "TEXT"
        present = values.dropna()
        if pd.api.types.is_bool_dtype(values) or (
            len(present) and all(isinstance(v, bool | np.bool_) for v in present)
        ):
            kind = "BOOLEAN"
        if pd.api.types.is_datetime64_any_dtype(values):
            kind = "TIMESTAMPTZ" if getattr(values.dt, "tz", None) is not None else "TIMESTAMP"
        columns.append(f"{quoted(column)} {kind}")
    rows = [
        tuple(None if pd.isna(v) else v for v in row)
        for row in frame.itertuples(index=False, name=None)
    ]
    with psycopg.connect(url) as connection:
        connection.execute(f"DROP TABLE IF EXISTS {quoted(name)}")
        connection.execute(f"CREATE TABLE {quoted(name)} ({', '.join(columns)})")
        cursor = connection.cursor()
        with cursor.copy(f"COPY {quoted(name)} FROM STDIN") as copy:
            for row in rows:
                copy.write_row(row)


@pytest.fixture(scope="session")
def spark_master():
    """One local Spark session for the whole run (``open_spark`` reuses it); stopped at the end."""
    try:
        import pyspark  # noqa: F401
    except ImportError:
        missing("pyspark (requirements.txt)")
    if shutil.which("java") is None:
        missing("Java 17 (Debian package openjdk-17-jre-headless)")
    yield "local[2]"
    from pyspark.sql import SparkSession

    session = SparkSession.getActiveSession()
    if session is not None:
        session.stop()
