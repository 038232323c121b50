"""Where the rows are: a DuckDB file or folder, or a PostgreSQL table or query.

A source answers SQL with small pandas frames; it never returns the rows themselves except a
sample of the first rows for the column types. Connection details other than the database
name stay inside the connection: ``name`` (shown in results, recipes and reports) carries no
user name or password.
"""

from __future__ import annotations

import contextlib
import os
import re
import threading
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TypeVar
from urllib.parse import urlsplit

import numpy as np
import pandas as pd

from engine.aggregate.sql import DUCKDB, POSTGRES, SPARK, Dialect, literal, quoted
from engine.errors import HazelError, preview_values
from engine.io.memory import PARQUET_SUFFIXES, TEXT_SUFFIXES

SAMPLE_ROWS = 2000
BOOLEAN_OID = 16  # PostgreSQL's type code of boolean columns
STATEMENT_TIMEOUT = 600.0  # seconds a database statement may run (--statement-timeout)
WAIT_SECONDS = 0.1  # how often ``SqlSource.wait`` is asked whether to go on
CANCEL_SECONDS = 15.0  # how long a cancelled statement is given to stop
T = TypeVar("T")
DUCKDB_MEMORY_LIMIT = "3GB"  # DuckDB spills to a temporary folder beyond this


class SourceError(HazelError):
    """A data source that cannot be opened or queried."""


@dataclass
class SqlSource:
    """A connection, the SQL text naming the rows (``relation``) and how to describe them."""

    backend: str
    version: str
    dialect: Dialect
    relation: str
    name: str
    connection: object = field(repr=False)
    kept: list = field(default_factory=list, repr=False)  # Spark frames cached by materialize
    path: Path | None = None  # the file or folder read (none for a database)
    # A column saying how many identical rows each row of ``relation`` stands for (see
    # ``grouped``); None: each row is one.
    weight: str | None = None
    statement_timeout: float | None = None  # seconds; PostgreSQL stops a longer statement
    # Called about every WAIT_SECONDS, in the calling thread, while a statement runs in a
    # worker thread; an exception it raises cancels the statement and is raised in its place
    # (the app's stop). None: statements run in the calling thread.
    wait: Callable[[], None] | None = field(default=None, repr=False)
    # The sentence of each query the backend failed (a section then says "not computed" in the
    # JSON); the command line prints them on stderr, so no failure hides behind exit 0.
    failures: list[str] = field(default_factory=list, repr=False)

    def rows(self) -> str:
        """The SQL aggregate counting rows."""
        if self.weight is None:
            return "COUNT(*)"
        return f"CAST(COALESCE(SUM({self.weight}), 0) AS BIGINT)"

    def rows_where(self, condition: str) -> str:
        """The SQL aggregate counting the rows where ``condition`` holds."""
        each = "1" if self.weight is None else self.weight
        return f"COALESCE(SUM(CASE WHEN {condition} THEN {each} ELSE 0 END), 0)"

    def count(self, expr: str) -> str:
        """The SQL aggregate counting the rows where ``expr`` is not NULL (``COUNT(expr)``)."""
        if self.weight is None:
            return f"COUNT({expr})"
        return self.rows_where(f"({expr}) IS NOT NULL")

    def grouped(self, columns: list[str], name: str) -> SqlSource:
        """The rows merged, in one pass, into cells of identical values of ``columns`` with
        their count: a source whose queries read the cells, or this source where the backend
        cannot keep a table (a read-only PostgreSQL session).

        Every count and check of a row depends on that row's values only, so a cell of n
        identical rows gives n times what one of them gives; a registry's rows repeat a few
        thousand days and a few covariate values, and the checks' passes then read a table of
        cells instead of every row."""
        if self.weight is not None or not columns:
            return self
        listed = ", ".join(quoted(c) for c in dict.fromkeys(columns))
        kept = self.materialize(
            f"SELECT {listed}, COUNT(*) AS _hazel_rows FROM {self.relation} GROUP BY {listed}", name
        )
        if kept is None:
            return self
        return replace(self, relation=kept, weight="_hazel_rows")

    def query(self, sql: str) -> pd.DataFrame:
        return self._watched(lambda: self._query(sql))

    def cancel(self) -> None:
        """Stop the statement running now, from any thread (the server stops it)."""
        if self.backend == "postgresql":
            self.connection.cancel_safe(timeout=10)
        elif self.backend == "duckdb":
            self.connection.interrupt()
        elif self.backend == "spark":
            self.connection.sparkContext.cancelAllJobs()

    def _watched(self, work: Callable[[], T]) -> T:
        """``work()``, in a worker thread while ``wait`` is called, when ``wait`` is set."""
        if self.wait is None:
            return work()
        outcome: dict = {}

        def run() -> None:
            try:
                outcome["value"] = work()
            except BaseException as exc:  # handed to the calling thread
                outcome["error"] = exc

        worker = threading.Thread(target=run, name="hazel-database-read", daemon=True)
        worker.start()
        try:
            while worker.is_alive():
                worker.join(WAIT_SECONDS)
                if worker.is_alive():
                    self.wait()
        except BaseException:
            with contextlib.suppress(Exception):  # a lost connection has nothing to cancel
                self.cancel()
            worker.join(CANCEL_SECONDS)  # the connection is free again once it has stopped
            raise
        if "error" in outcome:
            raise outcome["error"]
        return outcome["value"]

    def _query(self, sql: str) -> pd.DataFrame:
        try:
            if self.backend == "duckdb":
                return self.connection.execute(sql).df()
            if self.backend == "spark":
                return self.connection.sql(sql).toPandas()
            with self.connection.cursor() as cursor:
                cursor.execute(sql)
                rows = cursor.fetchall()
                columns = [c.name for c in cursor.description]
                booleans = {c.name for c in cursor.description if c.type_code == BOOLEAN_OID}
            return _typed(_named_once(pd.DataFrame(rows, columns=columns), self.name), booleans)
        except HazelError:
            raise
        except Exception as exc:  # the database's own message says what failed
            if self.backend == "postgresql":
                self.connection.rollback()
            sentence = self._failure(exc)
            if sentence not in self.failures:
                self.failures.append(sentence)
            raise SourceError(sentence) from exc

    def _failure(self, exc: Exception) -> str:
        """What went wrong, in one sentence without the database's echo of the SQL."""
        if self.backend == "spark":
            return spark_failure(exc, self.name)
        state = getattr(exc, "sqlstate", None)
        reason = _reason(exc)
        if state == "57014":  # query_canceled: the statement timeout or a cancel
            if "timeout" in reason:
                return (
                    f"The database stopped reading {self.name} after the statement timeout "
                    f"of {_seconds(self.statement_timeout)}; allow more time (--statement-timeout "
                    "SECONDS on the command line, the Statement timeout of the app's database "
                    "connection; 0 for no limit) or read fewer rows."
                )
            return f"The database read of {self.name} was cancelled."
        from_query = self.name.endswith("(query)")  # a user's --query, not a table
        if state == "42P01" and not from_query:  # undefined_table
            return (
                f"Reading {self.name}: the database has no such table ({reason}); check the "
                "table name (schema.table for a table outside the default schema)."
            )
        if state == "42501":  # insufficient_privilege
            return (
                f"Reading {self.name}: the database user may not read it ({reason}); ask the "
                "database's administrator for read access."
            )
        if from_query and state is not None and state[:2] in ("42", "22"):  # its text or values
            return f"Reading {self.name}: the database cannot run the query ({reason}); check it."
        return (
            f"The {self.backend} query on {self.name} failed: {reason}. Check the table or "
            "query and the column roles."
        )

    def query_columns(self, sql: str) -> dict[str, np.ndarray]:
        """``query``'s result as arrays, for results of millions of rows: DuckDB hands over its
        columns directly (several times faster than building a DataFrame); NULLs become NaN
        or None."""
        if self.backend == "duckdb":
            try:
                columns = self._watched(lambda: self.connection.execute(sql).fetchnumpy())
            except Exception:
                pass  # ``query`` runs it again, for its error message
            else:
                return {name: _unmasked(values) for name, values in columns.items()}
        frame = self.query(sql)
        return {name: frame[name].to_numpy() for name in frame.columns}

    def materialize(self, sql: str, name: str) -> str | None:
        """Keep the (small) result of ``sql`` as a temporary table inside the backend and
        return its name, or None where the session may not create one (PostgreSQL sessions
        are read-only): the Cox model's passes then read the compressed cells instead of the
        rows."""
        try:
            if self.backend == "duckdb":
                create = f"CREATE OR REPLACE TEMP TABLE {name} AS {sql}"
                self._watched(lambda: self.connection.execute(create))
                return name
            if self.backend == "spark":
                frame = self.connection.sql(sql).cache()
                self._watched(frame.count)  # computed once, here
                frame.createOrReplaceTempView(name)
                self.kept.append(frame)
                return name
        except Exception as exc:  # the database's own message says what failed
            message = " ".join(str(exc).split())
            raise SourceError(
                f"The {self.backend} backend could not keep a table of counted cells for "
                f"{self.name}: "
                f"{message}."
            ) from exc
        return None

    def random_sample(self, rows: int, seed: int) -> pd.DataFrame:
        """``rows`` rows of the source, those with the smallest hash of the whole row and the
        seed: the same rows every time for the same data and seed, and a simple random sample
        as far as the hash is uniform (identical rows share a hash, and are identical)."""
        columns = ", ".join(quoted(str(c)) for c in self.sample().columns)
        if self.backend == "duckdb":
            key = f"hash({columns}, {int(seed)})"
        elif self.backend == "spark":
            key = f"xxhash64({columns}, {int(seed)})"
        else:
            key = f"md5(CAST(ROW({columns}) AS TEXT) || {literal(str(int(seed)))})"
        return self.query(f"SELECT * FROM {self.relation} ORDER BY {key} LIMIT {int(rows)}")

    def sample(self) -> pd.DataFrame:
        """The first rows, for the column types and the examples in messages."""
        return self.query(f"SELECT * FROM {self.relation} LIMIT {SAMPLE_ROWS}")

    def close(self) -> None:
        if self.backend == "spark":  # the session lives on for the process (one per run)
            self.connection.catalog.dropTempView(self.relation)
            for frame in self.kept:
                frame.unpersist()
            self.kept.clear()
            return
        self.connection.close()


def _unmasked(values):
    """A column from DuckDB's ``fetchnumpy``: masked where NULL."""
    if not isinstance(values, np.ma.MaskedArray):
        return np.asarray(values)
    if values.dtype.kind in "iufb":
        return values.astype(float).filled(np.nan)
    return np.where(values.mask, None, values.data).astype(object)


def _reason(exc: Exception) -> str:
    """A database error's own message on one line, without the SQL it may echo (PostgreSQL's
    and DuckDB's ``LINE 1: SELECT ... ^``, Spark's query context)."""
    diag = getattr(exc, "diag", None)
    text = getattr(diag, "message_primary", None) or str(exc)
    text = re.split(r"\n\s*(?:LINE \d+:|== SQL)", text)[0]
    return " ".join(text.split()).rstrip(".") or type(exc).__name__


def _seconds(value: float | None) -> str:
    return "no limit" if not value else f"{value:g} s"


def _named_once(frame: pd.DataFrame, name: str) -> pd.DataFrame:
    """A query's result refused when it names a column twice (``SELECT *, arm``)."""
    repeated = list(dict.fromkeys(frame.columns[frame.columns.duplicated()]))
    if repeated:
        raise SourceError(
            f"{name} has more than one column named {preview_values(repeated)}; give each "
            "column its own name in the query (for example arm AS arm_2)."
        )
    return frame


def _typed(frame: pd.DataFrame, booleans=()) -> pd.DataFrame:
    """Decimal columns (PostgreSQL numeric) as floats, as a file reader would give them, and
    boolean columns as true/false columns (nullable where a value is missing, as DuckDB gives
    them) even when the first rows hold no value."""
    for column in booleans:
        values = frame[column]
        frame[column] = values.astype("boolean" if values.isna().any() else bool)
    for column in frame.columns:
        if frame[column].dtype == object:
            present = frame[column].dropna()
            if len(present) and all(type(v).__name__ == "Decimal" for v in present.head(50)):
                frame[column] = pd.to_numeric(frame[column], errors="coerce")
    return frame


def open_duckdb(path: str | Path, *, sep: str | None = None, decimal: str | None = None):
    """A Parquet file, a folder of Parquet files (a partitioned dataset) or a text file."""
    import duckdb

    path = Path(path)
    if not path.exists():
        raise SourceError(f"The data path {str(path)!r} does not exist; check the name.")
    if path.is_dir():
        files = sorted(p for p in path.rglob("*") if p.suffix.lower() in PARQUET_SUFFIXES)
        if not files:
            raise SourceError(
                f"The folder {str(path)!r} holds no .parquet files; give a Parquet file, a "
                "folder of Parquet files or a CSV file."
            )
        pattern = literal(str(path / "**" / "*.parquet"))
        relation = f"read_parquet({pattern}, hive_partitioning = true, union_by_name = true)"
    elif path.suffix.lower() in PARQUET_SUFFIXES:
        relation = f"read_parquet({literal(str(path))})"
        files = [path]
    elif path.suffix.lower() in TEXT_SUFFIXES:
        relation = _csv_relation(path, sep, decimal)
    else:
        raise SourceError(
            f"The DuckDB backend reads Parquet files, folders of them and text files; "
            f"{path.name!r} is neither. Use --backend memory for spreadsheets."
        )
    if path.is_dir() or path.suffix.lower() in PARQUET_SUFFIXES:
        relation = _durations_as_intervals(relation, files[0])
    import tempfile

    config = {
        "memory_limit": DUCKDB_MEMORY_LIMIT,
        "temp_directory": str(Path(tempfile.gettempdir()) / "hazel-duckdb"),
    }
    connection = duckdb.connect(":memory:", config=config)
    return SqlSource(
        "duckdb", duckdb.__version__, DUCKDB, relation, path.name, connection, path=path
    )


def _durations_as_intervals(relation: str, file: Path) -> str:
    """``relation`` with the Parquet file's ``duration`` columns as intervals (DuckDB reads
    them as bare integers of their unit), so they are read as time spans, as in memory."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    per_unit = {"s": "* 1000000", "ms": "* 1000", "us": "", "ns": "// 1000"}
    spans = [
        f"to_microseconds(CAST({quoted(f.name)} AS BIGINT) {per_unit[f.type.unit]}) AS "
        f"{quoted(f.name)}"
        for f in pq.read_schema(file)
        if pa.types.is_duration(f.type)
    ]
    if not spans:
        return relation
    return f"(SELECT * REPLACE ({', '.join(spans)}) FROM {relation}) AS hazel_spans"


def content_sha256(path: Path) -> str:
    """SHA-256 of a file, or of a folder's files (each relative name and content, in sorted
    order), read in chunks: the fingerprint a recipe and a report record."""
    import hashlib

    digest = hashlib.sha256()
    files = [path] if path.is_file() else sorted(p for p in path.rglob("*") if p.is_file())
    for file in files:
        if file != path:
            digest.update(str(file.relative_to(path)).encode() + b"\0")
        with file.open("rb") as handle:
            while chunk := handle.read(1 << 22):
                digest.update(chunk)
    return digest.hexdigest()


def source_fingerprint(source: SqlSource, rows_read: int):
    """The ``DataFingerprint`` of rows aggregated where they are: a file's or folder's SHA-256,
    or none for a database (its rows are not read here), with the source's name (never a
    user name or password), rows, columns and backend."""
    from engine.analysis.recipe import DataFingerprint

    columns = tuple(str(c) for c in source.query(f"SELECT * FROM {source.relation} LIMIT 0"))
    return DataFingerprint(
        sha256=content_sha256(source.path) if source.path is not None else "",
        rows=int(rows_read),
        columns=columns,
        file_name=source.name,
        backend=source.backend,
    )


def _csv_relation(path: Path, sep: str | None, decimal: str | None) -> str:
    """read_csv with the separator, decimal mark, missing-value tokens and quoting Hazel's reader
    uses (``engine.io.text``: a field may be quoted with ", a quote inside it doubled; an
    apostrophe is an ordinary character), so a file means the same rows on both."""
    from engine.io.tables import ImportOptions
    from engine.io.text import SAMPLE_BYTES, _sniff, missing_token_variants, read_head

    options = ImportOptions(sep=sep, decimal=decimal)
    head = read_head(path, SAMPLE_BYTES)
    sniffed = _sniff(head, path.stat().st_size > SAMPLE_BYTES, options, path.name)
    tokens = ", ".join(literal(t) for t in missing_token_variants(options.missing_tokens))
    utf8 = sniffed.encoding.lower().replace("-", "").replace("_", "") in ("utf8", "utf8sig")
    encoding = "utf-8" if utf8 else "latin-1"
    return (
        f"read_csv({literal(str(path))}, delim = {literal(sniffed.sep)}, header = true, "
        f"decimal_separator = {literal(sniffed.decimal)}, nullstr = [{tokens}], "
        f"encoding = {literal(encoding)}, quote = '\"', escape = '\"')"
    )


POSTGRES_URL = re.compile(r"^postgres(ql)?://")
WRITING = re.compile(
    r"\b(insert|update|delete|drop|alter|create|truncate|grant|revoke|copy|merge|call|do|"
    r"vacuum|reindex|cluster|comment|lock|refresh|set|reset)\b",
    re.IGNORECASE,
)


def is_database_url(text: str) -> bool:
    return bool(POSTGRES_URL.match(str(text)))


def check_statement_timeout(seconds, what: str = "The statement timeout") -> float:
    """The statement timeout in seconds (0: no limit), refused unless a number from 0 up."""
    try:
        value = float(seconds)
    except (TypeError, ValueError):
        value = float("nan")
    if not (np.isfinite(value) and value >= 0):
        shown = f"{seconds:g}" if isinstance(seconds, int | float) else repr(seconds)
        raise SourceError(
            f"{what} must be a number of seconds, 0 or more (0: no limit); got {shown}."
        )
    return value


def open_postgres(
    url: str,
    *,
    table: str | None = None,
    query: str | None = None,
    statement_timeout: float = STATEMENT_TIMEOUT,
) -> SqlSource:
    """A table or a read-only query of a PostgreSQL database (``postgresql://USER@HOST:PORT/DB``);
    the session is read-only, so nothing can be written through Hazel. A statement running
    longer than ``statement_timeout`` seconds (0: no limit) is stopped by the server."""
    timeout = check_statement_timeout(statement_timeout)
    if (table is None) == (query is None):
        raise SourceError(
            'A database needs exactly one of --table NAME or --query "SELECT ..."; got '
            f"{'both' if table else 'neither'}."
        )
    if query is not None:
        text = query.strip().rstrip(";")
        if not re.match(r"^(select|with)\b", text, re.IGNORECASE) or WRITING.search(text):
            raise SourceError(
                f"The query must only read (SELECT or WITH ... SELECT); got {query[:60]!r}. "
                "Hazel never writes to a database."
            )
        if ";" in text:
            raise SourceError("Give a single query (no ';' inside it).")
        relation = f"({text}) AS hazel_source"
    else:
        relation = ".".join(quoted(part) for part in table.split("."))
    try:
        import psycopg
    except ImportError as exc:  # pragma: no cover - installed with the requirements
        raise SourceError(
            "Reading PostgreSQL needs the psycopg package; install the requirements."
        ) from exc
    parts = urlsplit(url)
    name = f"{parts.hostname or 'localhost'}:{parts.port or 5432}/{parts.path.lstrip('/')}"
    try:
        connection = psycopg.connect(url, connect_timeout=10)
        connection.execute("SET SESSION CHARACTERISTICS AS TRANSACTION READ ONLY")
        connection.execute("SET TIME ZONE 'UTC'")  # times with a zone read as UTC, as in memory
        milliseconds = max(1, round(timeout * 1000)) if timeout else 0
        connection.execute(
            "SELECT set_config('statement_timeout', %s, false)", (f"{milliseconds}ms",)
        )
        connection.commit()
        version = connection.execute("SHOW server_version").fetchone()[0]
    except psycopg.Error as exc:
        raise SourceError(_connection_failure(name, exc)) from exc
    shown = f"{name} {table}" if table else f"{name} (query)"
    source = SqlSource(
        "postgresql", version, POSTGRES, relation, shown, connection, statement_timeout=timeout
    )
    source.sample()  # a missing table or a bad query fails here, with the database's reason
    return source


def _connection_failure(name: str, exc: Exception) -> str:
    """Why the server refused a connection, in one sentence that says what to check."""
    message = " ".join(str(exc).split()) or type(exc).__name__
    detail = message.split("FATAL:", 1)[-1].strip()
    if re.search(r"password", detail, re.I):
        user = re.search(r'for user "([^"]*)"', detail)
        refused = (
            f"the server refused the password for the user {user.group(1)!r}"
            if user
            else "the server asks for a password and none was given"
        )
        return (
            f"Could not connect to the database {name}: {refused}. Check the password (and "
            "the user name); it can be given in the address, the app's password field, "
            "PGPASSWORD or .pgpass."
        )
    missing = re.search(r'(database|role) "([^"]*)" does not exist', detail)
    if missing:
        what = "database" if missing.group(1) == "database" else "user"
        return (
            f"Could not connect to the database {name}: the server has no {what} "
            f"{missing.group(2)!r}. Check the {what} name in the address."
        )
    detail = detail.rstrip(". ") + ("" if detail.rstrip(". ").endswith("?") else ".")
    return (
        f"Could not connect to the database {name}: {detail} Check the address, the port, the "
        "user, the password and that the server is running."
    )


SPARK_VIEW = "hazel_source"
SPARK_LOCAL_HOST = "127.0.0.1"  # the driver's address for a local master (nothing else sees it)
SPARK_LOCAL_DRIVER_MEMORY = "2g"  # a local session's heap: issue 21's 10 M-row run needed 2 GB
SPARK_BYTES_PER_PARTITION = 128 * 1024**2  # common practice: about 128 MB of input a partition
# Spark's signs that a step was lost for lack of memory or of an executor, not for the query
SPARK_RESOURCE_FAILURES = re.compile(
    r"TaskResultLost|OutOfMemory|Java heap space|maxResultSize|ExecutorLostFailure|"
    r"Lost executor|GC overhead|Container killed|FetchFailed",
    re.IGNORECASE,
)
SPARK_REMOTE_PREFIXES = ("hdfs:", "s3a:", "abfss:", "gs:", "file:")


class SparkSettingError(SourceError):
    """A ``--spark-conf`` entry that is not KEY=VALUE."""


def spark_settings(entries) -> dict[str, str]:
    """``KEY=VALUE`` texts (``--spark-conf``, repeatable) as a dict, the last of a key winning."""
    settings: dict[str, str] = {}
    for entry in entries or ():
        key, sep, value = str(entry).partition("=")
        key = key.strip()
        if not sep or not key or not key.startswith("spark.") or not value.strip():
            raise SparkSettingError(
                f"--spark-conf {str(entry)!r} must be KEY=VALUE with a Spark setting's name, for "
                "example --spark-conf spark.driver.memory=4g."
            )
        settings[key] = value.strip()
    return settings


def spark_shuffle_partitions(cores: int, input_bytes: int | None) -> int:
    """Partitions of Spark's shuffles for Hazel's aggregates, from the cluster and the data:
    one per ``SPARK_BYTES_PER_PARTITION`` of input, at least one per core (so every core works)
    and at most two per core (Hazel's aggregates are small: Spark's default of 200 made a
    10 M-row run on a small cluster spend most of its time scheduling empty tasks)."""
    cores = max(1, int(cores))
    wanted = cores if input_bytes is None else -(-int(input_bytes) // SPARK_BYTES_PER_PARTITION)
    return max(cores, min(2 * cores, wanted))


def spark_failure(exc: Exception, name: str, *, reading: bool = False) -> str:
    """A Spark failure in one sentence: the first line of Spark's own message (never the Java
    stack trace), and for a lost step what to give more of. ``reading``: opening the data."""
    text = str(getattr(exc, "desc", None) or exc)
    text = re.sub(r"^An error occurred while calling [\w.$]+\.\s*:?\s*", "", text.strip())
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    first = next((line for line in lines if not line.startswith("at ")), type(exc).__name__)
    first = re.split(r"\s+at (?:org|java|scala|sun)\.", first)[0]
    first = re.sub(r"^(?:[a-z]+\.)+[A-Za-z]*(?:Exception|Error):\s*", "", first).rstrip(". ")
    first = first if len(first) <= 240 else first[:237].rstrip() + "..."
    if SPARK_RESOURCE_FAILURES.search(text):
        return (
            f"Spark lost a step of the work on {name} ({first}): the driver or an executor ran "
            "short of memory or was lost. Give them more, for example --spark-conf "
            "spark.driver.memory=4g (and spark.executor.memory=4g on a cluster), or use "
            "--backend duckdb."
        )
    if reading:
        return f"Spark could not read {name}: {first}. Check the path and the Spark settings."
    return f"The spark query on {name} failed: {first}. Check the data and the column roles."


def open_spark(
    path: str | Path,
    *,
    master: str = "local[*]",
    settings: dict[str, str] | None = None,
    driver_host: str | None = None,
) -> SqlSource:
    """A Parquet file or folder read by Spark (a local session by default, or the cluster at
    ``master``); one session per process, reused by later calls.

    ``settings`` are Spark settings (``--spark-conf``), applied last so they win over Hazel's.
    ``driver_host`` is the address executors reach the driver at: by default 127.0.0.1 for a
    local master only (elsewhere Spark's own choice, this machine's name). Spark's console
    progress bars are off, its log shows errors only and goes to ``spark_log_path``, so
    stderr carries Hazel's lines."""
    import shutil

    settings = dict(settings or {})
    remote = str(path).startswith(SPARK_REMOTE_PREFIXES)
    path = Path(path)
    if not remote and not path.exists():
        raise SourceError(f"The data path {str(path)!r} does not exist; check the name.")
    if not remote and path.is_file() and path.suffix.lower() not in PARQUET_SUFFIXES:
        raise SourceError(
            f"The Spark backend reads Parquet files and folders of them; {path.name!r} is not "
            "one. Use --backend duckdb for text files."
        )
    if shutil.which("java") is None and not os.environ.get("JAVA_HOME"):
        raise SourceError(
            "Spark needs Java (17 or later), which is not installed; install the Debian package "
            "openjdk-17-jre-headless or use --backend duckdb."
        )
    try:
        from pyspark.sql import SparkSession
    except ImportError as exc:  # pragma: no cover - installed with the requirements
        raise SourceError("The Spark backend needs the pyspark package.") from exc
    local = master.startswith("local")
    hazel = {
        "spark.ui.enabled": "false",
        "spark.ui.showConsoleProgress": "false",  # no [Stage 12:==>  (2 + 2) / 4] on stderr
        "spark.sql.ansi.enabled": "true",
        "spark.sql.ansi.doubleQuotedIdentifiers": "true",
        "spark.sql.session.timeZone": "UTC",
        # results come back to the driver as Arrow columns, not pickled rows
        "spark.sql.execution.arrow.pyspark.enabled": "true",
    }
    if driver_host or local:
        hazel["spark.driver.host"] = driver_host or SPARK_LOCAL_HOST
    if local and not driver_host:
        hazel["spark.driver.bindAddress"] = SPARK_LOCAL_HOST
    if local:  # the driver is the executor too: Spark's 1 GB lost a 10 M-row Cox model's results
        hazel["spark.driver.memory"] = SPARK_LOCAL_DRIVER_MEMORY
    try:
        from pyspark import SparkConf

        conf = SparkConf().setMaster(master).setAppName("hazel")
        conf.setAll(list({**hazel, **settings}.items()))
        _start_spark_quietly(conf)
        session = SparkSession.builder.config(conf=conf).getOrCreate()
        session.sparkContext.setLogLevel("ERROR")
        reader = session.read.option("mergeSchema", "true")
        frame = reader.parquet(str(path))
        if "spark.sql.shuffle.partitions" not in settings:
            size = None if remote else _bytes_on_disk(path)
            partitions = spark_shuffle_partitions(session.sparkContext.defaultParallelism, size)
            session.conf.set("spark.sql.shuffle.partitions", str(partitions))
        frame.createOrReplaceTempView(SPARK_VIEW)
    except Exception as exc:
        raise SourceError(spark_failure(exc, path.name, reading=True)) from exc
    return SqlSource("spark", session.version, SPARK, SPARK_VIEW, path.name, session, path=path)


def spark_log_path() -> Path:
    """Where the Java side of Spark writes its own messages (its startup notes, its log):
    a file in the temporary folder, one per process, so stderr carries Hazel's lines only."""
    import tempfile

    return Path(tempfile.gettempdir()) / f"hazel-spark-{os.getpid()}.log"


def _start_spark_quietly(conf) -> None:
    """Start Spark's Java process with its output going to ``spark_log_path``, unless this
    process already has one (a session is reused)."""
    from pyspark import SparkContext
    from pyspark.java_gateway import launch_gateway

    if SparkContext._gateway is not None:
        return
    with spark_log_path().open("w") as log:
        gateway = launch_gateway(conf, popen_kwargs={"stdout": log, "stderr": log})
    SparkContext(conf=conf, gateway=gateway)


def _bytes_on_disk(path: Path) -> int:
    if path.is_file():
        return path.stat().st_size
    return sum(p.stat().st_size for p in path.rglob("*") if p.is_file())
