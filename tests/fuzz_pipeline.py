"""Hostile inputs for the whole pipeline: bytes -> import -> roles -> checks -> analysis -> JSON ->
report. Shared by the default fuzz test (``tests/test_fuzz.py``, a few hundred seeded examples)
and the large run (``tests/benchmarks/bench_fuzz.py``, 10,000 and more).

``run_case`` never raises: it returns what happened (a result, a clean ``HazelError``, or an
uncaught exception with its traceback), how long it took and whether the row accounting held.
The strategies build files the way users' exports go wrong: odd values in every role (Unicode
digits, infinities, 1e30 and subnormal times, far and implausible dates, mixed UTC offsets, stray
text in numbers, a level per row, empty groups), odd layouts (separators, decimal commas,
encodings, byte-order marks, ragged and truncated lines, huge cells, wide headers), Parquet with
nested values and named indexes, damaged workbooks, and raw random bytes.
"""

from __future__ import annotations

import io
import json
import math
import signal
import time
import traceback
import warnings
import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from hypothesis import strategies as st

from app.cli import SCHEMA_VERSION
from engine.analysis.run import ANALYSIS_DEFAULTS, run_analysis
from engine.errors import HazelError
from engine.io.tables import ImportOptions, read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import TIME_UNITS, Roles, suggest_roles
from engine.survival.compare import TESTS

HANG_SECONDS = 20  # a case still running after this is cut off and counted as a hang
# The report's rounding rules cannot yet print values of 1e27 and more (issue 10 item 4, on the
# analysis side); until that lands, the report stage is skipped when the JSON holds such a value.
REPORT_VALUE_LIMIT = float("inf")

# --- cell values ----------------------------------------------------------------------------------

ODD_TEXT = [
    "", " ", "NA", "n/a", ".", "-", "null", "NaN", "missing", "unknown", "?", "²", "³", "①", "٣",
    "1,5", "1.5e3", "inf", "-inf", "Infinity", "-0", "0x1F", "1e30", "1e-310", "1e400", "TRUE",
    "yes", "dead", "alive", "censored", "2", "\u202e%0.001", "\u200b", "\ufeff", "=1+1", "@x",
    "ä", "名前", "😀", '"', "'", ";", ",", "\t", "a\nb", "\x1b[31mred",
    # levels that look alike: invisible and look-alike characters beside the plain letter
    "A", "A\u200b", "\u200bA", "A\u200e", "A\u2060", "\u00a0A", "A\u00ad", "\u0391",
]  # fmt: skip
# first values of a date column that name only a year or a month (the rest are full dates)
PARTIAL_DATES = ["2020", "2020-06", "2020-6", "06/2020", "2020/06", "Jun 2020", "2020-06-01"]
DATES = [
    "2020-01-01", "2021-06-30", "0001-01-01", "9999-12-31", "1900-01-01", "1677-09-21",
    "2262-04-12", "31/12/2020", "12/31/2020", "01.02.2003", "2020-02-30", "2020-01-01T08:00+01:00",
    "2020-01-01T08:00:00-05:00", "2020-01-01 08:00", "2020-13-01", "yesterday", "2020/01/01",
    "1/2/3", "20200101",
]  # fmt: skip
DATE_FORMATS = [None] * 12 + ["%d/%m/%Y", "%Y-%m-%d", "%Q", "%Y-%m-%d %", "%Y-%Y-%d", "%"]
NUMBERS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True, width=64),
    st.integers(min_value=-(10**20), max_value=10**20),
    st.sampled_from([0.0, 1e30, 1e-310, 5e-324, 1e308, -1e-300, 0.5, 1.0, 2.0, 12.0, 365.25]),
)


def _cell():
    return st.one_of(
        NUMBERS.map(repr),
        st.sampled_from(ODD_TEXT),
        st.sampled_from(DATES),
        st.text(max_size=12),
        st.integers(min_value=0, max_value=3).map(str),
    )


COLUMN_KINDS = ["time", "event", "group", "date", "numeric", "text", "mixed", "empty", "per_row"]


@st.composite
def _column(draw, n: int, kind: str | None = None) -> list:
    kind = kind or draw(st.sampled_from(COLUMN_KINDS))
    if kind == "time":
        base = draw(st.sampled_from([1.0, 1e30, 1e-310, 1e-5, 1e5]))
        values = [repr(round(base * (i % 17 + 1) / 3, 3)) for i in range(n)]
    elif kind == "event":
        codes = draw(
            st.sampled_from(
                [["0", "1"], ["1", "2"], ["yes", "no"], ["dead", "alive"], ["True", "False"],
                 ["true", "false"], ["0", "1", "2"], ["censored", "relapse", "death"]]
            )
        )  # fmt: skip
        values = [codes[(i * 7 + 3) % 5 % len(codes)] for i in range(n)]
    elif kind == "group":
        levels = draw(st.lists(_cell(), min_size=1, max_size=4))
        values = [levels[i % len(levels)] for i in range(n)]
    elif kind == "date":
        values = [
            draw(st.sampled_from(DATES)) if i % 7 == 0 else f"20{10 + i % 10}-0{1 + i % 9}-1{i % 9}"
            for i in range(n)
        ]
        if n and draw(st.booleans()):  # a partial date first (or further down)
            at = draw(st.sampled_from([0, 0, min(14, n - 1), n - 1]))
            values[at] = draw(st.sampled_from(PARTIAL_DATES))
    elif kind == "numeric":
        values = [repr(round(40 + (i * 37 % 23) * 1.3, 1)) for i in range(n)]
    elif kind == "per_row":
        values = [f"p{i}" for i in range(n)]
    elif kind == "empty":
        values = [""] * n
    else:
        values = (
            [draw(_cell()) for _ in range(n)]
            if kind == "mixed"
            else [draw(st.sampled_from(ODD_TEXT)) for _ in range(n)]
        )
    # a few odd cells anywhere
    for _ in range(draw(st.integers(min_value=0, max_value=3))):
        if n:
            values[draw(st.integers(min_value=0, max_value=n - 1))] = draw(_cell())
    return values


@st.composite
def tables(draw) -> pd.DataFrame:
    """Mostly a usable table (a time, an event, a group) with odd cells and odd extra columns."""
    # zero-, one- and few-row tables often: every analysis must say why it cannot run
    tiny = draw(st.integers(min_value=0, max_value=3)) == 0  # one time in four
    n = draw(st.integers(min_value=0, max_value=3 if tiny else 60))
    columns: dict[str, list] = {}
    if draw(st.integers(min_value=0, max_value=3)):  # three times in four
        columns["futime"] = draw(_column(n, "time"))
        columns["status"] = draw(_column(n, "event"))
        columns["arm"] = draw(_column(n, "group"))
    for i in range(draw(st.integers(min_value=0 if columns else 1, max_value=5))):
        name = draw(
            st.one_of(
                st.sampled_from(["start", "end", "age", "id", "group", "time", "entry"]),
                st.text(max_size=8),
            )
        )
        name = name if name and name not in columns else f"c{i}"
        columns[name] = draw(_column(n))
    return pd.DataFrame(columns)


# --- files ----------------------------------------------------------------------------------------


@st.composite
def text_files(draw) -> tuple[bytes, str]:
    frame = draw(tables())
    sep = draw(st.sampled_from([",", ";", "\t", "|"]))
    text = frame.to_csv(index=False, sep=sep, lineterminator=draw(st.sampled_from(["\n", "\r\n"])))
    if sep != "," and draw(st.booleans()):
        text = text.replace(".", ",")  # decimal commas
    encoding = draw(st.sampled_from(["utf-8"] * 4 + ["utf-8-sig", "utf-16", "cp1252", "latin-1"]))
    data = text.encode(encoding, errors="replace")
    data = draw(_mutated(data))
    return data, draw(st.sampled_from(["data.csv", "data.txt", "data.tsv", "export"]))


@st.composite
def _mutated(draw, data: bytes) -> bytes:
    for _ in range(draw(st.sampled_from([0, 0, 0, 1, 1, 2, 3]))):
        how = draw(st.sampled_from(["truncate", "insert", "ragged", "huge", "wide", "none"]))
        where = draw(st.integers(min_value=0, max_value=max(len(data), 1)))
        if how == "truncate":
            data = data[:where]
        elif how == "insert":
            data = data[:where] + draw(st.binary(max_size=8)) + data[where:]
        elif how == "ragged":
            data = data[:where] + b",x,y,z\n" + data[where:]
        elif how == "huge":
            data = (
                data[:where]
                + b"a" * draw(st.sampled_from([10_000, 200_000, 1_100_000]))
                + data[where:]
            )
        elif how == "wide":
            header = b",".join(
                b"c%d" % i for i in range(draw(st.sampled_from([300, 3000, 20_000])))
            )
            data = header + b"\n" + data
    return data


@st.composite
def parquet_files(draw) -> tuple[bytes, str]:
    import pyarrow as pa
    import pyarrow.parquet as pq

    frame = draw(tables())
    columns = {}
    for name in frame.columns:
        values = frame[name]
        as_number = pd.to_numeric(values, errors="coerce")
        kind = draw(st.sampled_from(["text", "number", "list", "struct", "bool"]))
        if kind == "bool":  # a boolean column (an event as True/False), with a missing cell
            truth = [str(v).strip().lower() in ("1", "true", "yes", "dead") for v in values]
            columns[str(name)] = pa.array(
                [None if i % 11 == 5 else t for i, t in enumerate(truth)], type=pa.bool_()
            )
        elif kind == "number":
            columns[str(name)] = pa.array(as_number.to_numpy(dtype=float), type=pa.float64())
        elif kind == "list":
            columns[str(name)] = pa.array([[v, v] if i % 3 else None for i, v in enumerate(values)])
        elif kind == "struct":
            columns[str(name)] = pa.array([{"v": v} for v in values])
        else:
            columns[str(name)] = pa.array(list(values), type=pa.string())
    table = pa.table(columns)
    if draw(st.booleans()) and len(frame.columns) and len(frame):
        out = table.to_pandas()
        index_name = draw(st.sampled_from([str(frame.columns[0]), "index", None]))
        out.index = pd.Index(np.arange(len(out)) * 3 + 1, name=index_name)
        buffer = io.BytesIO()
        out.to_parquet(buffer)
    else:
        buffer = io.BytesIO()
        pq.write_table(table, buffer)
    data = buffer.getvalue()
    if not draw(st.integers(min_value=0, max_value=3)):
        data = draw(_mutated(data))
    return data, "data.parquet"


@st.composite
def excel_files(draw) -> tuple[bytes, str]:
    from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE

    def legal(text) -> str:
        return ILLEGAL_CHARACTERS_RE.sub("", str(text))[:50]

    frame = draw(tables()).iloc[:20, :4]
    frame = frame.map(legal)
    frame.columns = [legal(c) for c in frame.columns]
    buffer = io.BytesIO()
    frame.to_excel(buffer, index=False)
    data = bytearray(buffer.getvalue())
    if not draw(st.integers(min_value=0, max_value=3)) and len(data) > 100:
        with zipfile.ZipFile(io.BytesIO(bytes(data))) as book:
            names = book.namelist()
            info = book.getinfo(draw(st.sampled_from(names)))
        start = info.header_offset + 30 + len(info.filename) + len(info.extra)
        size = max(info.compress_size, 1)
        at = start + draw(st.integers(min_value=0, max_value=size - 1))
        data[at : at + 8] = draw(st.binary(min_size=8, max_size=8))
    return bytes(data), "data.xlsx"


def files():
    return st.one_of(
        text_files(),
        text_files(),
        text_files(),
        parquet_files(),
        excel_files(),
        st.tuples(st.binary(max_size=400), st.sampled_from(["x.csv", "x.parquet", "x.xlsx", "x"])),
    )


# --- roles and settings ---------------------------------------------------------------------------

CAUSE_MAPS = [
    (("1", "relapse"), ("2", "death")),
    (("2", "death"), ("1", "relapse")),  # the first cause given is the event of interest
    (("relapse", "relapse"), ("death", "death")),
    (("1", "relapse"),),
]
# encodings a user might type, text and not (idna, rot13, base64 ... are codecs, not encodings)
ENCODINGS = [None] * 60 + [
    "utf-8", "latin-1", "utf-16", "utf-32", "ascii", "cp1252", "utf-7", "idna", "rot13",
    "base64", "zlib_codec", "hex", "uu", "punycode", "bz2", "mbcs", "no-such-codec", "",
]  # fmt: skip
SEPARATORS = [None] * 40 + [",", ";", "\t", "|", "ab", "", '"', "\n", "."]


@st.composite
def import_options(draw) -> dict:
    """Mostly detection; sometimes a separator, decimal mark or encoding typed by hand (the
    ``ImportOptions`` fields: made inside the case, where a refusal is a clean error)."""
    return {
        "sep": draw(st.sampled_from(SEPARATORS)),
        "decimal": draw(st.sampled_from([None] * 24 + [".", ",", ";"])),
        "encoding": draw(st.sampled_from(ENCODINGS)),
    }


TIME_LISTS = [[], [], [0.0], [1.0], [1.0, 5.0], [1e9], [5e-324], [3.0, 1.0]]


@st.composite
def analysis_settings(draw, roles: Roles) -> dict:
    """The core analyses with drawn options, and each optional analysis switched on one time in
    three, as a user or a recipe might: on one-row, zero-row and odd tables alike each gives a
    result or says in its own place why it cannot."""
    chosen = {k: dict(ANALYSIS_DEFAULTS[k]) for k in ("curves", "comparison", "cox")}
    times = st.sampled_from(TIME_LISTS)
    chosen["curves"].update(
        times=draw(times), rmst_horizon=draw(st.sampled_from([None, None, 1.0, 10.0, 1e9]))
    )
    chosen["comparison"]["test"] = draw(st.sampled_from(TESTS))
    if chosen["comparison"]["test"] == "fleming-harrington":
        chosen["comparison"].update(rho=draw(st.sampled_from([0.0, 1.0])), gamma=1.0)
    numeric = [c for c in roles.covariates if c not in roles.categorical]
    chosen["cox"].update(
        ties=draw(st.sampled_from(["efron", "breslow"])),
        variance=draw(st.sampled_from(["auto", "auto", "model", "robust"])),
        ph_time_scale=draw(st.sampled_from(["survival", "rank", "time", "log-time"])),
    )
    if numeric and draw(st.integers(min_value=0, max_value=3)) == 0:
        chosen["cox"]["splines"] = [
            {"variable": numeric[0], "knots": draw(st.sampled_from([3, 4]))}
        ]
    if roles.covariates and draw(st.integers(min_value=0, max_value=3)) == 0:
        chosen["cox"]["split"] = {"times": draw(st.sampled_from([[1.0], [0.0], [1e9]])),
                                  "changing": list(roles.covariates[:1])}  # fmt: skip

    def switched_on() -> bool:
        return draw(st.integers(min_value=0, max_value=2)) == 0

    if switched_on():
        chosen["parametric"] = {
            "by_group": draw(st.booleans()),
            "times": draw(times),
            "horizon": draw(st.sampled_from([None, 1.0, 1e9])),
        }
    if switched_on():
        chosen["landmark"] = {"time": draw(st.sampled_from([0.0, 0.5, 1.0, 1e9]))}
    if switched_on():
        chosen["sample_size"] = {}
    if switched_on():
        chosen["baseline"] = {"compare": draw(st.sampled_from([None, "smd", "test"]))}
    if roles.covariates and switched_on():
        chosen["performance"] = {
            "times": draw(st.sampled_from([[1.0], [1.0, 5.0], [1e9], [0.0]])),
            "calibration_time": draw(st.sampled_from([None, None, 1.0, 1e9])),
            "replicates": draw(st.sampled_from([0, 0, 3])),
        }
    if roles.group and roles.covariates and switched_on():
        chosen["subgroups"] = {"variables": [roles.covariates[0]]}
    if roles.event_causes and switched_on():
        causes = [name for _, name in roles.event_causes]
        chosen["competing"] = {
            "times": draw(times),
            "fine_gray": draw(st.sampled_from([None, causes[0], causes[-1], "no such cause"])),
        }
    return chosen


def cli_options(roles: Roles) -> list[str]:
    """The command-line options for a set of roles (the ones ``analyze`` takes)."""
    options = []
    if roles.time:
        options += ["--time", roles.time]
    if roles.start and roles.end:
        options += ["--start", roles.start, "--end", roles.end]
    if roles.event:
        options += ["--event", roles.event]
    for value in roles.event_values:
        options += ["--event-value", str(value)]
    for value, cause in roles.event_causes:
        options += ["--competing", f"{value}={cause}"]
    if roles.group:
        options += ["--group", roles.group]
    if roles.covariates:
        options += ["--covariates", ",".join(roles.covariates)]
    return options


@st.composite
def cli_extras(draw, roles: Roles) -> list[str]:
    """Options beyond the roles: optional analyses, and pairs of options that contradict each
    other or name something that cannot be (a report suffix Hazel does not write, a filter that
    keeps no row, a calibration time past follow-up, a codec that is not a text encoding)."""
    column = roles.time or roles.end or "x"
    families = [
        [],
        ["--parametric"],
        ["--parametric", "--horizon", "1e9"],
        ["--landmark", "1"],
        ["--performance", "1,5", "--bootstrap", "0"],
        ["--performance", "10", "--calibration-time", "1e9", "--bootstrap", "0"],
        ["--performance", "1e9", "--bootstrap", "0"],
        ["--baseline"],
        ["--power-hr", "0.7"],
        ["--times", "0,1,1e9"],
        ["--filter", f"{column}:at_most:-1"],
        ["--filter", f"{column}:not_missing", "--parametric", "--landmark", "0"],
        ["--encoding", draw(st.sampled_from([e for e in ENCODINGS if e is not None]))],
        ["--sep", draw(st.sampled_from([s for s in SEPARATORS if s is not None]))],
        ["--report", draw(st.sampled_from(["out.pdf", "out.html", "out.docx", "out.xlsx", "out"]))],
        ["--day-first", "--date-format", "%Y-%m-%d"],
        ["--time-unit", "years", "--unit", "days"],
        ["--test", "fleming-harrington", "--rho", "1", "--gamma", "1"],
        ["--variance", "robust"],
        ["--ties", "breslow", "--ph-time-scale", "log-time"],
    ]
    if roles.covariates:
        families += [["--spline", roles.covariates[0]], ["--split-at", "1", "--changing",
                     roles.covariates[0]], ["--subgroups", roles.covariates[0]]]  # fmt: skip
    if roles.event_causes:
        families += [["--fine-gray", roles.event_causes[0][1]], ["--fine-gray", "no-such-cause"]]
    picked = draw(st.lists(st.sampled_from(families), max_size=2))
    return [option for family in picked for option in family]


def cli_case(content: bytes, name: str, options: list[str], folder) -> tuple[int, str]:
    """Run ``analyze`` in process on the input; (exit status, what broke the contract or "").
    The contract: exit 0, or 2 with exactly one ``error:`` line on standard error; never 1 and
    never a traceback."""
    import contextlib

    from app.cli import main as cli_main

    path = Path(folder) / (Path(name).name or "input")
    path.write_bytes(content)
    options = [str(Path(folder) / o) if o.startswith("out") else o for o in options]
    out, err = io.StringIO(), io.StringIO()
    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(HANG_SECONDS * 3)
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = cli_main(["analyze", str(path), *options, "--json", "-"])
        except SystemExit as exit_:  # argparse: an option value it refuses
            code = exit_.code if isinstance(exit_.code, int) else 2
        except _Hang:
            return 1, f"still running after {HANG_SECONDS * 3} s: {options}"
        except Exception:
            return 1, f"escaped with {options}: {traceback.format_exc(limit=-4)}"
        finally:
            signal.alarm(0)
            signal.signal(signal.SIGALRM, previous)
    lines = err.getvalue().strip().splitlines()
    if code == 2 and not (len(lines) >= 1 and lines[-1].startswith("error: ")):
        return code, f"exit 2 without one error line: {err.getvalue()[:200]!r}"
    if code not in (0, 2):
        return code, f"exit {code} with {options}: {err.getvalue()[-300:]!r}"
    if "Traceback" in err.getvalue():
        return code, "traceback on stderr"
    return code, ""


@st.composite
def role_choices(draw, columns: list[str], suggested: Roles) -> Roles:
    """The suggested roles, or columns picked at random for each role (as a user might); each
    column gets one role, as the Column roles page allows."""
    if not columns:
        return suggested
    if draw(st.booleans()) and (suggested.time or suggested.start):
        return suggested
    free = list(columns)

    def take(optional: bool = True):
        if not free or (optional and draw(st.booleans())):
            return None
        column = draw(st.sampled_from(free))
        free.remove(column)
        return column

    if draw(st.booleans()):
        timing = {"time": take(False)}
    else:
        timing = {
            "start": take(False),
            "end": take(False),
            "date_format": draw(st.sampled_from(DATE_FORMATS)),
            "day_first": draw(st.booleans()),
            "implausible_dates": draw(st.sampled_from(["warn", "exclude"])),
        }
    if None in timing.values() and "time" not in timing:
        timing = {"time": timing["start"] or suggested.time}
    event = take()
    covariates = tuple(c for c in (take(), take()) if c)
    # named causes (competing risks), sometimes with event values that name every cause at once
    causes = draw(st.sampled_from([()] * 6 + list(CAUSE_MAPS)))
    event_values = draw(st.sampled_from([(), (), (), (), ("1",), ("2",), ("yes",), ("dead",)]))
    if causes and draw(st.booleans()):
        event_values = tuple(value for value, _ in causes)
    return Roles(
        **timing,
        event=event,
        event_values=event_values,
        event_causes=causes,
        group=take(),
        covariates=covariates,
        categorical=tuple(c for c in covariates if draw(st.booleans())),
        unit=draw(st.sampled_from(list(TIME_UNITS))),
        entry=take() if draw(st.booleans()) else None,
        strata=take() if draw(st.booleans()) else None,
    )


# --- one case -------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Outcome:
    kind: str  # "result", "error" (a HazelError) or "crash" (anything else)
    seconds: float
    stage: str  # the last stage reached: import, roles, checks, analysis, json, report
    detail: str = ""
    accounting_ok: bool = True
    # numeric warnings that escaped (file:line: message): on the command line they reach the
    # user's terminal, and they often mark a value computed from an overflow or 0/0
    numeric_warnings: tuple[str, ...] = ()


class _Hang(BaseException):
    """Raised by the alarm when a case runs past HANG_SECONDS (not an Exception: never caught)."""


def _alarm(_signum, _frame):
    raise _Hang


def run_case(
    data: bytes,
    name: str,
    choose_roles,
    *,
    report: bool = True,
    options: dict | None = None,
    choose_settings=None,
) -> Outcome:
    """One file through every stage. ``choose_roles(columns, suggested)`` returns the Roles,
    ``choose_settings(roles)`` the analysis settings (default: the core analyses' defaults)."""
    started = time.perf_counter()
    stage = "import"
    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(HANG_SECONDS)
    caught = warnings.catch_warnings(record=True)
    escaped = caught.__enter__()
    warnings.simplefilter("always", RuntimeWarning)
    try:
        table = read_table(data, ImportOptions(**(options or {})), name=name)
        stage = "roles"
        suggestions = suggest_roles(table.frame)
        roles = choose_roles([str(c) for c in table.frame.columns], suggestions.to_roles())
        stage = "checks"
        prepared = prepare(table.frame, roles, malformed_lines=table.malformed_lines)
        report_data = prepared.report.to_dict()
        accounted = report_data["rows_used"] + sum(e["rows"] for e in report_data["excluded"])
        accounting_ok = accounted == report_data["rows_read"]
        stage = "analysis"
        settings = (
            choose_settings(roles)
            if choose_settings
            else {k: dict(ANALYSIS_DEFAULTS[k]) for k in ("curves", "comparison", "cox")}
        )
        sections = run_analysis(prepared, settings, table.frame)
        stage = "json"
        text = json.dumps({"schema": SCHEMA_VERSION, **sections}, allow_nan=False)
        json.loads(text)
        if report and _largest_number(sections) < REPORT_VALUE_LIMIT:
            stage = "report"
            from app.batch import report_from_json_and_results

            report_from_json_and_results(
                sections, settings, imported=table, prepared=prepared, filtered=None, warnings=[]
            )
        kind, detail = "result", ""
    except HazelError as exc:
        kind, detail, accounting_ok = "error", f"{type(exc).__name__}: {exc}"[:300], True
    except _Hang:
        kind, detail, accounting_ok = "crash", f"still running after {HANG_SECONDS} s", True
    except Exception:  # counting what escapes is the point of the fuzz run
        kind, detail, accounting_ok = "crash", traceback.format_exc(limit=-6), True
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
        caught.__exit__(None, None, None)
    numeric = tuple(
        sorted(
            {
                f"{Path(w.filename).name}:{w.lineno}: {w.message}"
                for w in escaped
                if issubclass(w.category, RuntimeWarning)
            }
        )
    )
    return Outcome(
        kind, time.perf_counter() - started, stage, detail, accounting_ok, numeric_warnings=numeric
    )


def _largest_number(value) -> float:
    if isinstance(value, dict):
        return max((_largest_number(v) for v in value.values()), default=0.0)
    if isinstance(value, list):
        return max((_largest_number(v) for v in value), default=0.0)
    if isinstance(value, int | float) and not isinstance(value, bool):
        return abs(float(value))
    return 0.0


def seconds_text(values: list[float]) -> str:
    values = sorted(values)
    if not values:
        return "none"
    p99 = values[min(len(values) - 1, math.ceil(0.99 * len(values)) - 1)]
    median = values[len(values) // 2]
    return f"median {median:.3f} s, 99th percentile {p99:.2f} s, max {values[-1]:.2f} s"
