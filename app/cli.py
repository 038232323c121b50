"""Command line: ``python -m app``. Imports no user-interface library.

``check`` reads a file, applies the roles given as options and reports what the data checks found.
The pieces (role options, loading, JSON output) are shared with later subcommands; the text
summaries printed to the shell are written by ``app.cli_text``.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from app.cli_scale import (
    add_backend_options,
    chosen_backend,
    computed_with,
    memory_computed_with,
    open_source,
    printable,
    refuse_row_options,
    source_summary,
)
from app.cli_text import analysis_summary, data_summary
from engine.analysis import ANALYSIS_DEFAULTS
from engine.analysis import run_analysis as run_engine_analysis
from engine.checks import PreparedData, prepare
from engine.errors import HazelError
from engine.io import ImportedTable, ImportOptions, read_table
from engine.recipe_schema import check_setting
from engine.roles import TIME_UNITS, Roles
from engine.text_safety import visible_text

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
    analyze = commands.add_parser(
        "analyze",
        help="curves, group comparison and Cox model (and more), as text, JSON and a report",
    )
    add_role_options(analyze)
    add_analysis_options(analyze)
    replay = analyze.add_argument_group("recipes and reports")
    replay.add_argument(
        "--recipe",
        metavar="RECIPE.json",
        help="replay a recipe saved by the app: its import options, roles, filters and settings "
        "(analysis options given here override the recipe's settings)",
    )
    replay.add_argument("--report", metavar="OUT.html", help="write a self-contained HTML report")
    analyze.set_defaults(run=run_analyze)
    return parser


TESTS = ("logrank", "gehan-breslow", "tarone-ware", "peto-peto", "fleming-harrington")


def add_analysis_options(parser: argparse.ArgumentParser) -> None:
    """Settings of the curves, the comparison and the Cox model (defaults as in a recipe)."""
    curves = parser.add_argument_group("curves")
    curves.add_argument("--times", metavar="T1,T2", help="times for survival estimates")
    curves.add_argument(
        "--ci-transform",
        choices=("log-log", "log", "linear"),
        help="scale of the pointwise interval (default log-log)",
    )
    curves.add_argument(
        "--confidence", type=float, help="confidence level of every interval (default 0.95)"
    )
    compare = parser.add_argument_group("group comparison")
    compare.add_argument(
        "--test", choices=TESTS, help="test comparing the groups (default logrank)"
    )
    compare.add_argument("--rho", type=float, help="Fleming–Harrington rho (default 0)")
    compare.add_argument("--gamma", type=float, help="Fleming–Harrington gamma (default 0)")
    cox = parser.add_argument_group("Cox model (with --covariates)")
    cox.add_argument(
        "--ties", choices=("efron", "breslow"), help="tied event times (default efron)"
    )
    cox.add_argument(
        "--ph-transform",
        choices=("km", "rank", "identity", "log"),
        help="time scale of the proportional-hazards test (default km)",
    )
    more = parser.add_argument_group("beyond the basics (each adds a section)")
    more.add_argument(
        "--competing",
        metavar="VALUE=CAUSE",
        action="append",
        default=[],
        help="map an event value to a named cause (repeatable; the first cause is the event of "
        "interest): cumulative incidence per cause and cause-specific Cox models",
    )
    more.add_argument(
        "--fine-gray",
        metavar="CAUSE",
        help="Fine–Gray model of the cumulative incidence of CAUSE on the covariates (with "
        "--competing; Gray's test per cause is added whenever there are groups)",
    )
    more.add_argument(
        "--parametric",
        action="store_true",
        help="exponential, Weibull, log-normal and log-logistic fits (AFT with --covariates)",
    )
    more.add_argument(
        "--horizon", type=float, help="end of the parametric curves (past follow-up: extrapolated)"
    )
    more.add_argument("--landmark", type=float, metavar="T", help="landmark analysis from time T")
    more.add_argument(
        "--power-hr",
        type=float,
        metavar="HR",
        help="events and subjects needed to detect this hazard ratio (Schoenfeld, Freedman)",
    )
    more.add_argument("--power", type=float, help="target power for --power-hr (default 0.8)")
    more.add_argument("--alpha", type=float, help="two-sided alpha for --power-hr (default 0.05)")
    more.add_argument(
        "--allocation", type=float, help="experimental : control subjects (default 1)"
    )
    more.add_argument(
        "--event-probability",
        type=float,
        help="expected share of subjects with the event (default 1)",
    )
    more.add_argument("--events", type=float, help="power of this many events for --power-hr")
    perf = parser.add_argument_group("prediction performance of the Cox model (with --covariates)")
    perf.add_argument(
        "--performance",
        metavar="T1,T2",
        help="Harrell's and Uno's C, time-dependent AUC and Brier score at these times, "
        "integrated Brier score, calibration and the bootstrap correction for optimism",
    )
    perf.add_argument("--tau", type=float, help="Uno's C up to this time (default: the last)")
    perf.add_argument(
        "--calibration-time", type=float, metavar="T", help="calibration at T (default: T1)"
    )
    perf.add_argument(
        "--risk-groups", type=int, help="groups of predicted risk for calibration (default 5)"
    )
    perf.add_argument(
        "--bootstrap", type=int, metavar="B", help="bootstrap replicates (default 100; 0: none)"
    )
    perf.add_argument("--seed", type=int, help="seed of the bootstrap (default 20261202)")


def add_role_options(parser: argparse.ArgumentParser) -> None:
    """The data file, import options, role options and ``--json``; shared by every subcommand."""
    parser.add_argument(
        "data",
        metavar="DATA",
        help="CSV/TSV/semicolon/pipe, .xlsx or .parquet; a folder of .parquet files; or a "
        "database address postgresql://USER@HOST:PORT/DB with --table or --query",
    )
    add_backend_options(parser)
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
        event_causes=tuple(getattr(args, "event_causes", ())),
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
    prepared = prepare(
        table.frame,
        roles_from_args(args),
        require_covariates=require_covariates,
        malformed_lines=table.malformed_lines,
    )
    return table, prepared


def show(text: str, stream=None) -> None:
    """Print text for a person: control characters and direction controls from file names and
    labels are shown as codes ([U+001B]), so no escape sequence reaches the terminal raw."""
    print(visible_text(text), file=stream or sys.stdout)


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


def run_check(args: argparse.Namespace) -> int:
    backend = chosen_backend(args)
    if backend != "memory":
        return run_aggregated(args, backend, check_only=True)
    table, prepared = load_prepared(args)
    if args.json != "-":
        show(data_summary(table, prepared))
    if args.json:
        write_json({"data": prepared.report.to_dict()}, args.json)
    return 0


def _times(text: str, option: str = "--times") -> list[float]:
    try:
        return [float(part) for part in _names(text)]
    except ValueError:
        raise UsageError(f"{option} expects numbers separated by commas, got {text!r}") from None


SETTING_OPTIONS = {
    "curves": {"times": "times", "ci_transform": "ci_transform", "confidence": "confidence"},
    "comparison": {"test": "test", "rho": "rho", "gamma": "gamma"},
    "cox": {"ties": "ties", "ph_transform": "ph_transform", "confidence": "confidence"},
    "parametric": {"horizon": "horizon", "times": "times"},
    "competing": {"times": "times", "fine_gray": "fine_gray"},
    "performance": {
        "times": "performance",
        "tau": "tau",
        "calibration_time": "calibration_time",
        "risk_groups": "risk_groups",
        "replicates": "bootstrap",
        "seed": "seed",
    },
    "landmark": {"time": "landmark", "test": "test"},
    "sample_size": {
        "hazard_ratio": "power_hr",
        "power": "power",
        "alpha": "alpha",
        "allocation_ratio": "allocation",
        "event_probability": "event_probability",
        "events": "events",
    },
}


def settings_from_args(args: argparse.Namespace, base: dict | None = None) -> dict[str, dict]:
    """The analysis settings (recipe layout): ``base`` (a recipe's, else the defaults) with the
    options given on the command line put over it. The optional analyses are switched on by
    their options (--competing, --parametric, --landmark, --power-hr) or by the recipe."""
    settings = {name: dict(ANALYSIS_DEFAULTS[name]) for name in ("curves", "comparison", "cox")}
    for name, values in (base or {}).items():
        settings[name] = {**ANALYSIS_DEFAULTS.get(name, {}), **values}
    switched = {
        "competing": bool(getattr(args, "competing", None)),
        "parametric": bool(getattr(args, "parametric", False)),
        "landmark": getattr(args, "landmark", None) is not None,
        "sample_size": getattr(args, "power_hr", None) is not None,
        "performance": getattr(args, "performance", None) is not None,
    }
    for name, on in switched.items():
        if on and name not in settings:
            settings[name] = dict(ANALYSIS_DEFAULTS[name])
    if getattr(args, "fine_gray", None) is not None and "competing" not in settings:
        raise UsageError(
            "--fine-gray needs causes: map the event values with --competing VALUE=CAUSE "
            "(or replay a recipe that maps them)"
        )
    for name, options in SETTING_OPTIONS.items():
        for setting, option in options.items():
            given = getattr(args, option, None)
            if given is None:
                continue
            flag = "--" + option.replace("_", "-")
            value = _times(given, flag) if setting == "times" else given
            # the recipe schema's range for the setting, named by the option
            check_setting(name, setting, value, flag)
            if name in settings:
                settings[name][setting] = value
    return settings


def run_analysis(
    imported: ImportedTable, prepared: PreparedData, settings: dict, source=None
) -> dict:
    """The JSON sections (without "schema") for one data set and its settings; ``source`` is
    the frame ``prepare`` was given (the table's own frame unless filters cut it down)."""
    return run_engine_analysis(prepared, settings, imported.frame if source is None else source)


# Options that set roles or import options: a recipe brings its own, so they cannot be mixed.
ROLE_OPTIONS = (
    "sep", "decimal", "encoding", "sheet", "time", "start", "end", "date_format", "time_unit",
    "event", "event_value", "group", "covariates", "categorical", "reference", "strata", "entry",
    "id", "competing",
)  # fmt: skip


def causes_from_args(args: argparse.Namespace) -> tuple[tuple[str, str], ...]:
    """``--competing VALUE=CAUSE`` pairs, in the order given."""
    pairs = []
    for item in getattr(args, "competing", None) or ():
        value, sep, cause = item.partition("=")
        if not sep or not value.strip() or not cause.strip():
            raise UsageError(f"--competing expects VALUE=CAUSE, got {item!r}")
        pairs.append((value.strip(), cause.strip()))
    return tuple(pairs)


def run_aggregated(args: argparse.Namespace, backend: str, *, check_only: bool = False) -> int:
    """check or analyze with the rows aggregated where they are (DuckDB, PostgreSQL)."""
    from engine.aggregate.analysis import run_aggregate_analysis
    from engine.aggregate.sql_checks import aggregate_checks

    refuse_row_options(args, backend)
    roles = roles_from_args(args)
    settings = None if check_only else settings_from_args(args)
    source = open_source(args, backend)
    try:
        data = aggregate_checks(source, roles)
        if check_only:
            sections = {"data": data.report.to_dict()}
        else:
            sections = {
                **run_aggregate_analysis(data, settings),
                "computed_with": computed_with(source),
            }
    finally:
        source.close()
    if args.json != "-":
        print(source_summary(source, data.report, roles))
        if not check_only:
            shown, lines = printable(sections)
            print(analysis_summary(shown, data.report.time_unit))
            print("\n".join(lines))
    if args.json:
        write_json(sections, args.json)
    return 0


def run_analyze(args: argparse.Namespace) -> int:
    from app.batch import load_recipe_run

    backend = chosen_backend(args)
    if backend != "memory":
        return run_aggregated(args, backend)

    filtered, warnings, source = None, [], None
    if args.recipe:
        given = [
            name for name in ROLE_OPTIONS if getattr(args, name, None) not in (None, [], False)
        ]
        if given or args.dayfirst:
            shown = ", ".join("--" + name.replace("_", "-") for name in given or ["dayfirst"])
            raise UsageError(
                f"--recipe brings its own import options and roles; leave out {shown} "
                "(or drop --recipe and give every role as an option)"
            )
        run = load_recipe_run(args.recipe, args.data)
        table, prepared, filtered, warnings = run.imported, run.prepared, run.filtered, run.warnings
        source = run.source
        settings = settings_from_args(args, base=run.settings)
        for warning in warnings:
            show(f"warning: {' '.join(warning.split())}", sys.stderr)
    else:
        causes = causes_from_args(args)
        if causes:
            args.event_causes = causes
        table, prepared = load_prepared(args)
        settings = settings_from_args(args)
    sections = run_analysis(table, prepared, settings, source)
    sections["computed_with"] = memory_computed_with()
    if filtered is not None and filtered.excluded:
        sections["filters"] = filtered.to_dict()
    if args.json != "-":
        show(data_summary(table, prepared))
        show(analysis_summary(sections, prepared.report.time_unit))
    if args.json:
        write_json(sections, args.json)
    if args.report:
        from app.batch import report_from_json_and_results, write_text

        html_text = report_from_json_and_results(
            sections,
            settings,
            imported=table,
            prepared=prepared,
            filtered=filtered,
            warnings=warnings,
        )
        write_text(args.report, html_text)
        if args.json != "-":
            show(f"Report written to {args.report}")
    return 0


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the process exit code (0 ok, 2 bad input, 1 a bug)."""
    try:
        args = build_parser().parse_args(argv)
        return args.run(args)
    except HazelError as exc:
        show(f"error: {' '.join(str(exc).split())}", sys.stderr)
        return 2
