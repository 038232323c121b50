"""Command-line pieces for data too big for memory: ``--backend``, databases, ``computed_with``.

``auto`` keeps a file in memory (the row-level engine, fastest for it) while the analysis's
estimated memory (``engine.io.memory.analysis_stays_in_memory``: rows x columns, not bytes) is
within ``AUTO_MEMORY_LIMIT``, and hands bigger CSV and Parquet files and folders of Parquet files
to DuckDB; a ``postgresql://`` address always aggregates inside the database. The engine's
``engine.aggregate`` layer does the work; this module only chooses, opens and prints.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from engine.errors import HazelError
from engine.io import memory

BACKENDS = ("auto", "memory", "duckdb", "spark")


class BackendUsageError(HazelError):
    """A backend option that does not fit the data given."""


def add_backend_options(parser: argparse.ArgumentParser) -> None:
    group = parser.add_argument_group("big data: where the rows are aggregated")
    group.add_argument(
        "--backend",
        choices=BACKENDS,
        default="auto",
        help=f"memory, DuckDB (out of core) or Spark; auto: memory while the analysis is "
        f"estimated (rows x columns) to need up to {memory.megabytes(memory.AUTO_MEMORY_LIMIT)}, "
        "DuckDB beyond and for folders (default auto)",
    )
    group.add_argument("--table", metavar="NAME", help="database table (DATA is a database URL)")
    group.add_argument(
        "--query", metavar="SELECT", help="read-only database query (DATA is a database URL)"
    )
    group.add_argument(
        "--statement-timeout",
        metavar="SECONDS",
        type=float,
        help="a database statement running longer is stopped by the server and the run ends "
        "with an error (0: no limit; default 600)",
    )
    group.add_argument(
        "--spark-master", metavar="URL", default="local[*]", help="Spark master (default local[*])"
    )
    group.add_argument(
        "--spark-conf",
        metavar="KEY=VALUE",
        action="append",
        default=[],
        help="a Spark setting, repeatable (for example spark.driver.memory=4g); it wins over "
        "Hazel's own",
    )
    group.add_argument(
        "--spark-driver-host",
        metavar="ADDRESS",
        help="the address a cluster's executors reach this computer at (default 127.0.0.1 for "
        "a local master, Spark's choice for a cluster)",
    )
    group.add_argument(
        "--sample-rows",
        metavar="N",
        type=int,
        help="with a backend: compute what per-time sums cannot give (robust variance, splines, "
        "Fine–Gray, parametric fits, ...) on a seeded random sample of N rows; every other "
        "section still uses all rows",
    )
    group.add_argument(
        "--sample-seed",
        metavar="S",
        type=int,
        default=20261202,
        help="seed of --sample-rows (default 20261202)",
    )


def chosen_backend(args: argparse.Namespace) -> str:
    """memory, duckdb or postgresql for these options and this DATA."""
    from engine.aggregate.sources import PARQUET_SUFFIXES, TEXT_SUFFIXES, is_database_url

    backend = getattr(args, "backend", "auto") or "auto"
    data = str(args.data)
    if is_database_url(data):
        if backend not in ("auto", "duckdb"):
            raise BackendUsageError(
                f"A database address is aggregated inside the database; --backend {backend} "
                "does not apply to it (leave --backend out)."
            )
        return "postgresql"
    if getattr(args, "statement_timeout", None) is not None:
        raise BackendUsageError(
            "--statement-timeout applies to a database address such as "
            "postgresql://USER@HOST:5432/DB (leave it out for files)."
        )
    if getattr(args, "table", None) or getattr(args, "query", None):
        raise BackendUsageError(
            "--table and --query need DATA to be a database address such as "
            "postgresql://USER@HOST:5432/DB."
        )
    spark_options = getattr(args, "spark_conf", None) or getattr(args, "spark_driver_host", None)
    if spark_options and backend != "spark":
        raise BackendUsageError(
            "--spark-conf and --spark-driver-host apply to --backend spark (add it, or leave "
            "them out)."
        )
    path = Path(data)
    if backend == "auto":
        if path.is_dir():  # a partitioned dataset; any other folder is refused as not a file
            has_parquet = any(p.suffix.lower() in PARQUET_SUFFIXES for p in path.rglob("*"))
            return "duckdb" if has_parquet else "memory"
        if not path.is_file() or path.suffix.lower() not in PARQUET_SUFFIXES | TEXT_SUFFIXES:
            return "memory"  # the in-memory reader reads (or refuses) every other format
        from app.cli import import_options_from_args  # the one reading of --sep

        sep = import_options_from_args(args).sep
        return "memory" if memory.analysis_stays_in_memory(path, sep=sep) else "duckdb"
    if backend == "memory" and path.is_dir():
        raise BackendUsageError(
            f"{data!r} is a folder: a partitioned Parquet dataset needs --backend duckdb (or auto)."
        )
    return backend


def open_source(args: argparse.Namespace, backend: str):
    from engine.aggregate import sources

    if backend == "postgresql":
        timeout = args.statement_timeout
        if timeout is None:
            timeout = sources.STATEMENT_TIMEOUT
        return sources.open_postgres(
            str(args.data),
            table=args.table,
            query=args.query,
            statement_timeout=sources.check_statement_timeout(timeout, "--statement-timeout"),
        )
    if backend == "spark":
        return sources.open_spark(
            args.data,
            master=args.spark_master,
            settings=sources.spark_settings(args.spark_conf),
            driver_host=args.spark_driver_host,
        )
    from app.cli import import_options_from_args  # the one reading of --sep and --decimal

    options = import_options_from_args(args)
    return sources.open_duckdb(args.data, sep=options.sep, decimal=options.decimal)


def backend_failures(source) -> list[str]:
    """One ``warning:`` line per query the backend failed: a section it cost says "not
    computed" in the JSON, and the exit code stays 0 for the sections that were computed."""
    return [f"warning: a section was not computed: {sentence}" for sentence in source.failures]


def memory_computed_with() -> dict:
    import pandas as pd

    return {"backend": "memory", "version": f"pandas {pd.__version__}", "sample": None}


def computed_with(source) -> dict:
    return {"backend": source.backend, "version": source.version, "sample": None}


def check_sample_options(args: argparse.Namespace, backend: str) -> None:
    rows = getattr(args, "sample_rows", None)
    if rows is None:
        return
    if backend == "memory":
        raise BackendUsageError(
            "--sample-rows applies where the rows stay in DuckDB, Spark or a database; in "
            "memory every section already uses every row (leave it out)."
        )
    if not 10 <= rows <= 10_000_000:
        raise BackendUsageError(
            f"--sample-rows must be between 10 and 10,000,000 rows (it is read into memory); "
            f"got {rows}."
        )


def sample_summary(record: dict | None) -> str:
    """The text summary's line on the sections computed on a sample."""
    if not record:
        return ""
    taken = ", ".join(record["sections"]) or "none were needed"
    return (
        f"On a random sample of {record['rows']:,} rows (seed {record['seed']}), because "
        f"per-time sums cannot give them: {taken}."
    )


def refuse_row_options(args: argparse.Namespace, backend: str) -> None:
    """Options that need the rows in memory, refused with the reason."""
    if getattr(args, "sheet", None) is not None:
        raise BackendUsageError(f"--sheet applies to Excel files, not to the {backend} backend.")


def source_summary(source, report, roles, filtered=None) -> str:
    from app.cli_text import filter_lines, report_summary

    header = f"Source: {source.name} (aggregated by {source.backend} {source.version})"
    return "\n".join([header, *filter_lines(filtered), report_summary(report, roles)])
