"""Command line: ``python -m app``. Imports no user-interface library.

``check`` reads a file, applies the roles given as options and reports what the data checks found.
The pieces (role options, loading, JSON output) are shared with later subcommands; the text
summaries printed to the shell are written by ``app.cli_text``.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from pathlib import Path

from app.cli_scale import (
    add_backend_options,
    backend_failures,
    check_sample_options,
    chosen_backend,
    computed_with,
    memory_computed_with,
    open_source,
    refuse_row_options,
    sample_summary,
    source_summary,
)
from app.cli_text import analysis_summary, data_summary, event_words
from engine.analysis.recipe_schema import check_setting
from engine.analysis.run import ANALYSIS_DEFAULTS
from engine.analysis.run import run_analysis as run_engine_analysis
from engine.cox.diagnostics import TIME_SCALES
from engine.errors import HazelError, ImportOptionError, NoRowsError
from engine.io.tables import ImportedTable, ImportOptions, read_table
from engine.io.text import text_encoding
from engine.prepare.checks import PreparedData, prepare
from engine.prepare.dates import IMPLAUSIBLE_CHOICES
from engine.prepare.filters import FilterError, FilterOutcome, RowFilter, apply_filters
from engine.prepare.roles import TIME_UNITS, Roles, event_in_words
from engine.text_safety import visible_text

SCHEMA_VERSION = 2  # README "Changes from schema 1" lists what changed


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
    replay.add_argument(
        "--report",
        metavar="OUT.html",
        help="write the report: self-contained HTML (.html), one Word document with its figures "
        "(.docx), or its tables as an Excel workbook (.xlsx)",
    )
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
    curves.add_argument(
        "--rmst-horizon",
        type=float,
        metavar="TAU",
        help="restricted mean survival time of each curve up to TAU",
    )
    curves.add_argument(
        "--rmst-origin",
        type=lambda text: text.replace("-", "_"),
        choices=("zero", "first_entry"),
        metavar="{zero,first-entry}",
        help="with delayed entry (--entry), where the restricted mean starts: time 0, taking "
        "survival as 1 before the first entry (default), or the first entry time",
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
        "--ph-time-scale",
        choices=TIME_SCALES,
        help="time scale of the proportional-hazards check: survival (time transformed by the "
        "Kaplan–Meier estimate, the default), rank, time or log-time",
    )
    cox.add_argument(
        "--variance",
        choices=("auto", "model", "robust"),
        help="standard errors: model-based, or robust (sandwich) clustered by --id; default "
        "auto = robust when ids repeat (episodes, recurrent events)",
    )
    cox.add_argument(
        "--spline",
        metavar="VAR[:K]",
        action="append",
        default=[],
        help="a numeric covariate as a restricted cubic spline with K knots (3-7, default 4), "
        "with its test of non-linearity (repeatable)",
    )
    cox.add_argument(
        "--split-at",
        metavar="T1,T2",
        help="refit the model with follow-up split at these times (and the PH check repeated)",
    )
    cox.add_argument(
        "--changing",
        metavar="A,B",
        help="with --split-at: covariates whose effect may differ before and after each time",
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
    more.add_argument(
        "--subgroups",
        metavar="A,B",
        help="with a two-level --group as the treatment: its hazard ratio within each level of "
        "these columns, and interaction tests",
    )
    more.add_argument(
        "--subgroup-groups",
        type=int,
        metavar="K",
        help="quantile groups for a numeric subgroup column (default 2)",
    )
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
    base = parser.add_argument_group("baseline table (each option switches it on)")
    base.add_argument(
        "--baseline",
        action="store_true",
        help="baseline table by group: counts and percentages, medians (quartiles) or means (SD), "
        "missing per column",
    )
    base.add_argument(
        "--baseline-group",
        metavar="COL",
        help="column whose groups the table compares (default: --group; 'none' for all rows only)",
    )
    base.add_argument(
        "--baseline-variables",
        metavar="A,B",
        help="columns to describe (default: the covariates, else every column without a role)",
    )
    base.add_argument(
        "--baseline-summary",
        choices=("median", "mean"),
        help="numeric columns as median (quartiles) or mean (SD) (default median)",
    )
    base.add_argument(
        "--baseline-compare",
        choices=("smd", "test"),
        help="add standardised differences (Austin 2009) or a test per column (not advised "
        "for randomised trials)",
    )


def add_role_options(parser: argparse.ArgumentParser) -> None:
    """The data file, import options, role options and ``--json``; shared by every subcommand."""
    parser.add_argument(
        "data",
        metavar="DATA",
        help="CSV/TSV/semicolon/pipe, .xlsx, .parquet, SPSS .sav/.zsav, Stata .dta, SAS "
        ".sas7bdat/.xpt; a folder of .parquet files; or a database address "
        "postgresql://USER@HOST:PORT/DB with --table or --query",
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
    roles.add_argument("--day-first", action="store_true", help="dates are day first (31/12/2020)")
    # the former spelling, kept for one release (a deprecation line goes to stderr)
    roles.add_argument("--dayfirst", action="store_true", help=argparse.SUPPRESS)
    roles.add_argument(
        "--implausible-dates",
        choices=IMPLAUSIBLE_CHOICES,
        help="dates before 1900 (1900-01-01 included) or after today: warn with counts "
        "(default) or exclude those rows",
    )
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
    rows = parser.add_argument_group("rows")
    rows.add_argument(
        "--filter",
        metavar="COL:RULE[:V1,V2]",
        action="append",
        default=[],
        help="keep only rows that pass (repeatable, applied in order before the data checks): "
        "rules in, not_in, between, at_least, at_most, not_missing; e.g. age:between:18,80, "
        "site:in:north,south, stage:not_missing",
    )
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
        day_first=args.day_first,
        implausible_dates=args.implausible_dates or "warn",
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
    """The reading options given; ImportOptions checks them (one rule for every way in)."""
    sep = args.sep
    if sep is not None:
        sep = {"\\t": "\t", "tab": "\t"}.get(sep, sep)
    sheet = args.sheet
    if sheet is not None and sheet.strip().isdigit():
        sheet = int(sheet)
    if args.encoding is not None:
        try:
            text_encoding(args.encoding)
        except HazelError as error:
            raise UsageError(f"--encoding: {error}") from None
    try:
        return ImportOptions(sep=sep, decimal=args.decimal, encoding=args.encoding, sheet=sheet)
    except ImportOptionError as error:  # the rule is ImportOptions'; the option named is ours
        raise UsageError(f"--{error.option}: {error}") from None


def filters_from_args(args: argparse.Namespace) -> tuple[RowFilter, ...]:
    """``--filter COL:RULE[:VALUES]`` options, in the order given (engine.prepare.filters'
    rules)."""
    try:
        return tuple(RowFilter.from_text(text) for text in getattr(args, "filter", None) or ())
    except FilterError as error:
        raise UsageError(f"--filter: {error}") from None


def load_prepared(
    args: argparse.Namespace, *, require_covariates: bool = False
) -> tuple[ImportedTable, PreparedData, FilterOutcome]:
    """The table, its prepared rows and what the ``--filter`` options removed (before the data
    checks, as a recipe's filters are)."""
    filters = filters_from_args(args)
    table = read_table(Path(args.data), import_options_from_args(args))
    filtered = apply_filters(table.frame, filters).refuse_if_empty()
    prepared = prepare(
        filtered.frame,
        roles_from_args(args),
        require_covariates=require_covariates,
        malformed_lines=table.malformed_lines,
    )
    return table, prepared, filtered


def show(text: str, stream=None) -> None:
    """Print text for a person: control characters and direction controls from file names and
    labels are shown as codes ([U+001B]), so no escape sequence reaches the terminal raw."""
    print(visible_text(text), file=stream or sys.stdout)


def write_json(sections: dict, out: str) -> None:
    """Write ``{"schema": SCHEMA_VERSION, **sections}`` to a file or to stdout ('-')."""
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
    table, prepared, filtered = load_prepared(args)
    sections = {"data": prepared.report.to_dict()}
    if filtered.excluded:
        sections["filters"] = filtered.to_dict()
    if args.json != "-":
        show(data_summary(table, prepared, filtered))
    if args.json:
        write_json(sections, args.json)
    return 0


def _times(text: str, option: str = "--times") -> list[float]:
    try:
        return [float(part) for part in _names(text)]
    except ValueError:
        raise UsageError(f"{option} expects numbers separated by commas, got {text!r}") from None


SETTING_OPTIONS = {
    "curves": {
        "times": "times",
        "ci_transform": "ci_transform",
        "confidence": "confidence",
        "rmst_horizon": "rmst_horizon",
        "rmst_origin": "rmst_origin",
    },
    "comparison": {"test": "test", "rho": "rho", "gamma": "gamma"},
    "cox": {
        "ties": "ties",
        "ph_time_scale": "ph_time_scale",
        "confidence": "confidence",
        "variance": "variance",
    },
    "subgroups": {"groups": "subgroup_groups"},
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
    "landmark": {"time": "landmark", "test": "test", "rho": "rho", "gamma": "gamma"},
    "sample_size": {
        "hazard_ratio": "power_hr",
        "power": "power",
        "alpha": "alpha",
        "allocation_ratio": "allocation",
        "event_probability": "event_probability",
        "events": "events",
    },
    "baseline": {
        "group": "baseline_group",
        "variables": "baseline_variables",
        "summary": "baseline_summary",
        "compare": "baseline_compare",
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
        "subgroups": bool(getattr(args, "subgroups", None)),
        "performance": getattr(args, "performance", None) is not None,
        "baseline": any(
            getattr(args, option, None) not in (None, False)
            for option in ("baseline", *SETTING_OPTIONS["baseline"].values())
        ),
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
            if setting == "times":
                value = _times(given, flag)
            elif name == "baseline" and setting == "variables":
                value = list(_names(given))
            elif name == "baseline" and setting == "group" and given.strip().lower() == "none":
                value = False
            else:
                value = given
            # the recipe schema's range for the setting, named by the option
            check_setting(name, setting, value, flag)
            if name in settings:
                settings[name][setting] = value
    _model_options(args, settings)
    return settings


def _model_options(args: argparse.Namespace, settings: dict[str, dict]) -> None:
    """--spline, --split-at / --changing and --subgroups into the settings."""
    splines = getattr(args, "spline", None) or []
    if splines:
        settings["cox"]["splines"] = [_spline(text) for text in splines]
    if getattr(args, "changing", None) and not getattr(args, "split_at", None):
        raise UsageError("--changing needs --split-at (the times after which effects may change)")
    if getattr(args, "split_at", None):
        times = _times(args.split_at, "--split-at")
        if not times:
            raise UsageError(f"--split-at expects times separated by commas, got {args.split_at!r}")
        settings["cox"]["split"] = {"times": times, "changing": list(_names(args.changing))}
    if getattr(args, "subgroups", None):
        settings["subgroups"]["variables"] = list(_names(args.subgroups))


def _spline(text: str) -> dict:
    """``VAR`` or ``VAR:K`` as a spline setting."""
    variable, sep, knots = text.rpartition(":") if ":" in text else (text, "", "")
    if not variable.strip():
        raise UsageError(f"--spline expects VAR or VAR:K, got {text!r}")
    if not sep:
        return {"variable": variable.strip(), "knots": 4}
    try:
        count = int(knots)
    except ValueError:
        raise UsageError(f"--spline expects VAR:K with K a whole number, got {text!r}") from None
    if not 3 <= count <= 7:
        raise UsageError(f"--spline {text!r}: the number of knots must be 3 to 7, got {count}")
    return {"variable": variable.strip(), "knots": count}


def run_analysis(
    imported: ImportedTable, prepared: PreparedData, settings: dict, source=None
) -> dict:
    """The JSON sections (without "schema") for one data set and its settings; ``source`` is
    the frame ``prepare`` was given (the table's own frame unless filters cut it down)."""
    return run_engine_analysis(prepared, settings, imported.frame if source is None else source)


# Options that set roles or import options: a recipe brings its own, so they cannot be mixed.
ROLE_OPTIONS = (
    "sep", "decimal", "encoding", "sheet", "time", "start", "end", "date_format", "day_first",
    "implausible_dates", "time_unit", "event", "event_value", "group", "covariates",
    "categorical", "reference", "strata", "entry", "id", "competing", "filter",
)  # fmt: skip


# Settings that name columns, and the option that sets each on the command line.
COLUMN_SETTINGS = {
    ("baseline", "variables"): "--baseline-variables",
    ("baseline", "group"): "--baseline-group",
    ("subgroups", "variables"): "--subgroups",
    ("cox", "splines"): "--spline",
    ("cox", "split"): "--changing",
}


def check_named_columns(settings: dict, columns) -> None:
    """A column named by an option (or the recipe's matching setting) that the data does not
    have is a usage error before any analysis runs, not a section left uncomputed."""
    available = list(dict.fromkeys(str(c) for c in columns))
    for (analysis, setting), option in COLUMN_SETTINGS.items():
        value = (settings.get(analysis) or {}).get(setting)
        if setting == "splines":
            names = [item.get("variable") for item in value or ()]
        elif setting == "split":
            names = list((value or {}).get("changing") or ())
        elif isinstance(value, str):
            names = [value]
        else:
            names = list(value or ())
        unknown = [str(name) for name in names if str(name) not in available]
        if unknown:
            shown = ", ".join(repr(visible_text(name)) for name in unknown)
            raise UsageError(
                f"{option} names column(s) {shown} that the data does not have; columns: "
                f"{', '.join(visible_text(c) for c in available[:12])}"
                + (" ..." if len(available) > 12 else "")
            )


def causes_from_args(args: argparse.Namespace) -> tuple[tuple[str, str], ...]:
    """``--competing VALUE=CAUSE`` pairs, in the order given."""
    pairs = []
    for item in getattr(args, "competing", None) or ():
        value, sep, cause = item.partition("=")
        if not sep or not value.strip() or not cause.strip():
            raise UsageError(f"--competing expects VALUE=CAUSE, got {item!r}")
        pairs.append((value.strip(), cause.strip()))
    return tuple(pairs)


def refuse_role_options_with_recipe(args: argparse.Namespace) -> None:
    """A recipe brings its own import options, roles and filters: options that set them too
    are a usage error, not a silent choice between the two."""
    given = [name for name in ROLE_OPTIONS if getattr(args, name, None) not in (None, [], False)]
    if given:
        shown = ", ".join("--" + name.replace("_", "-") for name in given)
        raise UsageError(
            f"--recipe brings its own import options, roles and filters; leave out {shown} "
            "(or drop --recipe and give every role as an option)"
        )


def show_results(args, sections: dict, settings: dict, head: str, unit: str, event, report):
    """The text summary, the JSON and the report (``report()`` gives its HTML) of one run."""
    if args.json != "-":
        show(head)
        show(
            analysis_summary(sections, unit, confidence=settings["cox"]["confidence"], event=event)
        )
    if args.json:
        write_json(sections, args.json)
    if args.report:
        from app.batch import write_bytes, write_text

        html_text = report()
        suffix = Path(args.report).suffix.lower()
        if suffix in (".docx", ".xlsx"):
            from app import exports_office

            make = exports_office.report_docx if suffix == ".docx" else exports_office.report_xlsx
            write_bytes(args.report, make(html_text))
        else:
            write_text(args.report, html_text)
        if args.json != "-":
            show(f"Report written to {args.report}")


def run_aggregated(args: argparse.Namespace, backend: str, *, check_only: bool = False) -> int:
    """check or analyze with the rows aggregated where they are (DuckDB, PostgreSQL, Spark).

    A recipe replays here as in memory (its roles, row filters and settings); its fingerprint
    is compared with the source's, and the report records the backend and the source's name,
    never a user name or password."""
    from app.batch import aggregated_curve_figure, read_recipe, report_from_json_and_results
    from engine.aggregate.analysis import run_aggregate_analysis
    from engine.aggregate.sources import source_fingerprint
    from engine.aggregate.sql_checks import aggregate_checks
    from engine.aggregate.sql_filters import keep_conditions, kept_rows
    from engine.analysis.recipe import fingerprint_differences

    refuse_row_options(args, backend)
    check_sample_options(args, backend)
    recipe, warnings = None, []
    if getattr(args, "recipe", None) and not check_only:
        refuse_role_options_with_recipe(args)
        recipe = read_recipe(args.recipe)
        filters = recipe.filters
        args.sep = recipe.import_options.get("sep")
        args.decimal = recipe.import_options.get("decimal")
        roles = Roles.from_dict(recipe.roles)
        settings = settings_from_args(args, base=recipe.settings())
    else:
        causes = causes_from_args(args)
        if causes:
            args.event_causes = causes
        roles = roles_from_args(args)
        settings = None if check_only else settings_from_args(args)
        filters = filters_from_args(args)
    source = open_source(args, backend)
    try:
        data = aggregate_checks(source, roles, filters=filters)
        if data.filtered is not None:
            data.filtered.refuse_if_empty()
        if not check_only:
            refuse_nothing_usable(data.report)
        if check_only:
            sections = {"data": data.report.to_dict()}
        else:
            sections = {
                **run_aggregate_analysis(data, settings),
                "computed_with": computed_with(source),
            }
            if args.sample_rows:
                from engine.aggregate.sampled import sections_from_sample

                rows = kept_rows(source, keep_conditions(filters, source.sample(), source))
                rows = rows.random_sample(args.sample_rows, args.sample_seed)
                sections, record = sections_from_sample(
                    sections, rows, roles, settings, args.sample_seed
                )
                sections["computed_with"]["sample"] = record
        if data.filtered is not None and data.filtered.excluded:
            sections["filters"] = data.filtered.to_dict()
        fingerprint = None
        if recipe is not None or getattr(args, "report", None):
            read = data.report.rows_read  # the rows before any filter
            read += sum(n for _, n in data.filtered.excluded) if data.filtered else 0
            fingerprint = source_fingerprint(source, read)
        if recipe is not None:
            warnings = fingerprint_differences(recipe.fingerprint, fingerprint)
    finally:
        source.close()
    for warning in warnings:
        show(f"warning: {' '.join(warning.split())}", sys.stderr)
    for line in backend_failures(source):
        show(line, sys.stderr)
    head = source_summary(source, data.report, roles, data.filtered)
    if not check_only and sections["computed_with"]["sample"]:
        head += "\n" + sample_summary(sections["computed_with"]["sample"])
    if check_only:
        if args.json != "-":
            show(head)
        if args.json:
            write_json(sections, args.json)
        return 0

    def report() -> str:
        figure = aggregated_curve_figure(data.counts, settings, data.report.time_unit, roles)
        return report_from_json_and_results(
            sections,
            settings,
            roles=roles,
            fingerprint=fingerprint,
            figures={"curves": figure},
            filtered=data.filtered,
            warnings=warnings,
        )

    show_results(
        args, sections, settings, head, data.report.time_unit, event_in_words(roles), report
    )
    return 0


REPORT_SUFFIXES = (".html", ".docx", ".xlsx")  # the report formats Hazel writes


def check_report_path(path: str | None) -> None:
    """A ``--report`` file name must end in a suffix Hazel writes, before anything runs (so no
    HTML lands in a file named .pdf)."""
    if path is not None and Path(path).suffix.lower() not in REPORT_SUFFIXES:
        raise UsageError(
            f"--report {path!r}: Hazel writes reports as {', '.join(REPORT_SUFFIXES)} "
            "(HTML, Word, Excel); end the file name in one of them."
        )


def refuse_nothing_usable(report) -> None:
    """``analyze`` with no usable row is bad input (exit 2 with the exclusion counts), never a
    run of empty sections that a script would read as success; ``check`` still reports."""
    reason = report.no_usable_rows()
    if reason is not None:
        raise NoRowsError(reason)


def run_analyze(args: argparse.Namespace) -> int:
    from app.batch import load_recipe_run, report_from_json_and_results

    check_report_path(args.report)
    backend = chosen_backend(args)
    check_sample_options(args, backend)
    if backend != "memory":
        return run_aggregated(args, backend)

    filtered, warnings, source = None, [], None
    if args.recipe:
        refuse_role_options_with_recipe(args)
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
        table, prepared, filtered = load_prepared(args)
        source = filtered.frame
        settings = settings_from_args(args)
    check_named_columns(settings, (table.frame if source is None else source).columns)
    refuse_nothing_usable(prepared.report)
    sections = run_analysis(table, prepared, settings, source)
    sections["computed_with"] = memory_computed_with()
    if filtered is not None and filtered.excluded:
        sections["filters"] = filtered.to_dict()

    def report() -> str:
        return report_from_json_and_results(
            sections,
            settings,
            imported=table,
            prepared=prepared,
            filtered=filtered,
            warnings=warnings,
        )

    head = data_summary(table, prepared, filtered)
    show_results(
        args, sections, settings, head, prepared.report.time_unit, event_words(prepared), report
    )
    return 0


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the process exit code (0 ok, 2 bad input, 1 a bug)."""
    try:
        args = build_parser().parse_args(argv)
        if getattr(args, "dayfirst", False):
            show(
                "warning: --dayfirst is deprecated and will be removed in the next release; "
                "use --day-first",
                sys.stderr,
            )
            args.day_first = True
        return args.run(args)
    except HazelError as exc:
        show(f"error: {' '.join(str(exc).split())}", sys.stderr)
        return 2
    except MemoryError:  # past the import's own check (which names the file and the figures)
        show(
            "error: Hazel ran out of memory; keep only the columns and rows the analysis needs, "
            "or use a computer with more memory",
            sys.stderr,
        )
        return 2
    except BrokenPipeError:  # the reader stopped early (| head): not an error of Hazel's
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
