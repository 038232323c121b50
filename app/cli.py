"""Command line: ``python -m app``. Imports no user-interface library.

``check`` reads a file, applies the roles given as options and reports what the data checks found.
The pieces (role options, loading, JSON output) are shared with later subcommands.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from engine.checks import PreparedData, prepare
from engine.errors import HazelError
from engine.io import ImportedTable, ImportOptions, read_table
from engine.roles import TIME_UNITS, Roles

SCHEMA_VERSION = 1


class UsageError(HazelError):
    """A command-line option is malformed."""


class _Parser(argparse.ArgumentParser):
    """argparse that reports bad options as one ``error: ...`` line and exit code 2."""

    def error(self, message: str):
        raise UsageError(message)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="python -m app", description="Hazel: time-to-event data from a shell.")
    commands = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    check = commands.add_parser("check", help="read a file, apply roles and report the data checks")
    add_role_options(check)
    check.set_defaults(run=run_check)
    return parser


def add_role_options(parser: argparse.ArgumentParser) -> None:
    """The data file, import options, role options and ``--json``; shared by every subcommand."""
    parser.add_argument("data", metavar="DATA", help="CSV/TSV/semicolon/pipe, .xlsx or .parquet")
    read = parser.add_argument_group("reading the file")
    read.add_argument("--sep", help="column separator (default: detected); use '\\t' for tab")
    read.add_argument("--decimal", help="decimal mark, '.' or ',' (default: detected)")
    read.add_argument("--encoding", help="text encoding (default: UTF-8, else Windows-1252)")
    read.add_argument("--sheet", help="Excel sheet name or number from 0 (default: the first)")
    roles = parser.add_argument_group("column roles")
    roles.add_argument("--time", metavar="COL", help="duration column")
    roles.add_argument("--start", metavar="COL", help="start-date column (with --end)")
    roles.add_argument("--end", metavar="COL", help="end-date column (with --start)")
    roles.add_argument("--date-format", metavar="FMT", help="date format such as %%d/%%m/%%Y")
    roles.add_argument("--dayfirst", action="store_true", help="dates are day first (31/12/2020)")
    roles.add_argument(
        "--unit", choices=list(TIME_UNITS), default="days", help="unit results are reported in"
    )
    roles.add_argument(
        "--time-unit",
        choices=list(TIME_UNITS),
        help="unit of the --time column if it differs from --unit",
    )
    roles.add_argument("--event", metavar="COL", help="event column")
    roles.add_argument(
        "--event-value",
        metavar="V",
        action="append",
        default=[],
        help="value meaning the event (repeatable); needed when the coding is not recognised",
    )
    roles.add_argument("--group", metavar="COL", help="group column")
    roles.add_argument("--covariates", metavar="A,B,C", help="comma-separated covariate columns")
    roles.add_argument("--categorical", metavar="A,B", help="covariates to treat as categories")
    roles.add_argument(
        "--reference",
        metavar="COL=LEVEL",
        action="append",
        default=[],
        help="reference level of a categorical covariate (repeatable)",
    )
    roles.add_argument("--strata", metavar="COL", help="strata column")
    roles.add_argument("--entry", metavar="COL", help="entry-time column (delayed entry)")
    roles.add_argument("--id", metavar="COL", help="subject id column")
    parser.add_argument("--json", metavar="OUT", help="write JSON results to OUT ('-' = stdout)")


def _names(text: str | None) -> tuple[str, ...]:
    return tuple(part.strip() for part in (text or "").split(",") if part.strip())


def roles_from_args(args: argparse.Namespace) -> Roles:
    references = []
    for item in args.reference:
        column, sep, level = item.partition("=")
        if not sep or not column.strip():
            raise UsageError(f"--reference expects COL=LEVEL, got {item!r}")
        references.append((column.strip(), level.strip()))
    return Roles(
        time=args.time,
        start=args.start,
        end=args.end,
        date_format=args.date_format,
        dayfirst=args.dayfirst,
        unit=args.unit,
        source_unit=args.time_unit,
        event=args.event,
        event_values=tuple(args.event_value),
        group=args.group,
        covariates=_names(args.covariates),
        categorical=_names(args.categorical),
        reference=tuple(references),
        strata=args.strata,
        entry=args.entry,
        id=args.id,
    )


def import_options_from_args(args: argparse.Namespace) -> ImportOptions:
    sep = args.sep
    if sep is not None:
        sep = {"\\t": "\t", "tab": "\t"}.get(sep, sep)
        if len(sep) != 1:
            raise UsageError(f"--sep must be one character, got {args.sep!r}")
    sheet = args.sheet
    if sheet is not None and sheet.strip().isdigit():
        sheet = int(sheet)
    if args.decimal not in (None, ".", ","):
        raise UsageError(f"--decimal must be '.' or ',', got {args.decimal!r}")
    return ImportOptions(sep=sep, decimal=args.decimal, encoding=args.encoding, sheet=sheet)


def load_prepared(
    args: argparse.Namespace, *, require_covariates: bool = False
) -> tuple[ImportedTable, PreparedData]:
    table = read_table(Path(args.data), import_options_from_args(args))
    prepared = prepare(table.frame, roles_from_args(args), require_covariates=require_covariates)
    return table, prepared


def write_json(sections: dict, out: str) -> None:
    """Write ``{"schema": 1, **sections}`` to a file or to stdout ('-')."""
    text = json.dumps({"schema": SCHEMA_VERSION, **sections}, indent=2, allow_nan=False)
    if out == "-":
        sys.stdout.write(text + "\n")
        return
    try:
        Path(out).write_text(text + "\n", encoding="utf-8")
    except OSError as exc:
        raise UsageError(f"cannot write {out}: {exc.strerror or exc}") from None


def data_summary(table: ImportedTable, prepared: PreparedData) -> str:
    """A readable summary of the import and the data checks."""
    report = prepared.report
    roles = prepared.roles
    options = table.options
    lines = [f"File: {table.source_name} ({table.file_format}, sha256 {table.sha256[:12]}…)"]
    if table.file_format == "csv":
        lines.append(
            f"Read with separator {options.sep!r}, decimal {options.decimal!r}, "
            f"encoding {options.encoding}" + ("" if table.confident else " (detection unsure)")
        )
    lines += [f"  note: {note}" for note in table.notes]
    time = roles.time or f"{roles.start} → {roles.end}"
    lines.append(f"Time: {time} (reported in {report.time_unit})")
    if report.event_coding is not None:
        lines.append(f"Event: {report.event_coding.describe()}")
    lines.append(
        f"Rows read {report.rows_read}, used {report.rows_used}: "
        f"{report.events} events, {report.censored} censored"
    )
    for reason, rows in report.excluded:
        lines.append(f"  excluded: {rows} row(s), {reason}")
    if roles.group:
        lines.append(f"By {roles.group}:")
        for _, row in report.group_counts.iterrows():
            lines.append(
                f"  {row['group']!s:<20} n={row['n']:<7} events={row['events']:<7} "
                f"censored={row['censored']}"
            )
    lines += [f"Warning: {warning}" for warning in report.warnings]
    return "\n".join(lines)


def run_check(args: argparse.Namespace) -> int:
    table, prepared = load_prepared(args)
    if args.json != "-":
        print(data_summary(table, prepared))
    if args.json:
        write_json({"data": prepared.report.to_dict()}, args.json)
    return 0


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the process exit code (0 ok, 2 bad input, 1 a bug)."""
    try:
        args = build_parser().parse_args(argv)
        return args.run(args)
    except HazelError as exc:
        message = " ".join(str(exc).split())
        print(f"error: {message}", file=sys.stderr)
        return 2
