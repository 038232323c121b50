"""Start and end dates as durations inside a database, with the rules, reasons and texts of
``checks.prepare`` (``engine.prepare.dates``).

Two kinds of date column are read in SQL: native DATE/TIMESTAMP columns (with a time zone:
in UTC) and ISO text (``YYYY-MM-DD``, optionally `` HH:MM`` or ``THH:MM:SS``) when the
column's values are mostly ISO (``dates.is_iso_column``), as memory decides. Each date becomes
whole seconds since 1970 by calendar arithmetic on its year, month, day and time (no database
date parser involved).
A text value that is not plain, valid ISO with a year pandas can hold (``dates._NS_YEARS``) is
read by memory's own parser: its distinct values come back, are parsed by
``dates.parse_iso_texts`` and go into the SQL as a lookup. What cannot be done identically
(a date format, other text layouts, dates held as numbers, too many odd texts,
failures the other day/month order would read) is refused with one sentence naming the column.
"""

from __future__ import annotations

import datetime
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.aggregate.sql import counted, literal, number, quoted
from engine.errors import RoleError, SettingError, preview_values
from engine.prepare.checks import (
    END_BEFORE_START,
    IMPLAUSIBLE_DATE,
    MISSING_TIME,
    UNPARSEABLE_DATE,
    _ambiguous_date_notes,
)
from engine.prepare.dates import (
    _NS_YEARS,
    EARLIEST_PLAUSIBLE,
    implausible_text,
    is_iso_column,
    parse_dates,
    parse_iso_texts,
)
from engine.prepare.roles import TIME_UNITS, Roles

PLAIN_ISO = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}([ T][0-9]{2}:[0-9]{2}(:[0-9]{2})?)?$"
ODD_TEXTS_LIMIT = 10_000  # distinct date texts read by memory's parser and sent back as SQL
AMBIGUOUS_ROWS = 5000  # the rows ``checks._ambiguous_date_notes`` looks at
SECONDS = {"start": "_hazel_start_s", "end": "_hazel_end_s"}
MEMORY_HINT = "; use --backend memory for these data."


@dataclass(frozen=True)
class DatesInSql:
    relation: str  # the source with the columns SECONDS["start"] and SECONDS["end"]
    time: str  # the duration in the roles' unit
    conditions: tuple[tuple[str, str], ...]  # (SQL condition, exclusion reason), in order


def civil_seconds(y: str, m: str, d: str, hh: str, mi: str, ss: str) -> str:
    """Seconds since 1970-01-01 of a proleptic Gregorian date and time (years from 1), by the
    days-from-civil arithmetic of H. Hinnant (2013), in doubles (exact: whole numbers)."""
    year = f"({y} - CASE WHEN {m} <= 2 THEN 1 ELSE 0 END)"
    era = f"FLOOR({year} / 400.0)"
    yoe = f"({year} - {era} * 400)"
    mp = f"(CASE WHEN {m} > 2 THEN {m} - 3 ELSE {m} + 9 END)"
    doy = f"(FLOOR((153 * {mp} + 2) / 5.0) + {d} - 1)"
    doe = f"({yoe} * 365 + FLOOR({yoe} / 4.0) - FLOOR({yoe} / 100.0) + {doy})"
    days = f"({era} * 146097 + {doe} - 719468)"
    return f"({days} * 86400 + {hh} * 3600 + {mi} * 60 + {ss})"


def _divisible(y: str, k: int) -> str:
    return f"({y} = FLOOR({y} / {k}.0) * {k})"


def _refuse(column: str, why: str) -> SettingError:
    return SettingError(
        f"The date column {column!r} {why}: such dates are not yet read inside a database "
        "exactly as in memory" + MEMORY_HINT
    )


class _DateColumn:
    """One date column: its seconds in SQL and the odd texts memory's parser read."""

    def __init__(self, source, sample: pd.DataFrame, column: str, roles: Roles):
        self.column, self.source, self.d = column, source, source.dialect
        self.col = quoted(column)
        self.failing: list[str] = []  # distinct texts that are no date (memory's parser too)
        self.is_text = False
        series = sample[column]
        if roles.date_format:
            raise _refuse(column, f"is read with the date format {roles.date_format!r}")
        if pd.api.types.is_datetime64_any_dtype(series):
            self.seconds = self._native()
            return
        present = series.dropna()
        if len(present) == 0:
            raise _refuse(column, "is empty in its first rows, so its layout is not known")
        first = present.iloc[0]
        texts = [str(v).strip() for v in present.unique()] if isinstance(first, str) else []
        if isinstance(first, datetime.date | np.datetime64):
            self.seconds = self._native()
        elif texts and is_iso_column(texts):  # judged from the sample's values, as in memory
            self.is_text = True
            self.seconds = self._text(roles)
        elif texts:
            shown = preview_values([t for t in texts if not is_iso_column([t])][:3])
            raise _refuse(column, f"holds dates such as {shown}, not ISO text (YYYY-MM-DD)")
        else:
            shown = preview_values([first])
            raise _refuse(column, f"holds values such as {shown}, not dates or text")

    def _native(self) -> str:
        """A date or time column; one with a time zone is read in UTC, as memory reads it."""
        zoned = False
        if self.d.name == "duckdb":
            kind = self.source.query(
                f"SELECT typeof({self.col}) AS t FROM {self.source.relation} LIMIT 1"
            )["t"]
            zoned = bool(len(kind)) and ("TZ" in kind[0] or "ZONE" in kind[0])
        ts = self.d.utc_timestamp(self.col, zoned)
        part = {p: f"EXTRACT({p} FROM {ts})" for p in ("YEAR", "MONTH", "DAY", "HOUR", "MINUTE")}
        second = f"FLOOR(EXTRACT(SECOND FROM {ts}))"
        return civil_seconds(*part.values(), second)

    def _text(self, roles: Roles) -> str:
        d = self.d
        text = d.text(self.col)
        t = f"TRIM({text})"

        def piece(start: int, length: int) -> str:
            return d.to_number(f"SUBSTR({t}, {start}, {length})")

        y, m, day = piece(1, 4), piece(6, 2), piece(9, 2)
        hh = f"(CASE WHEN LENGTH({t}) >= 16 THEN {piece(12, 2)} ELSE 0 END)"
        mi = f"(CASE WHEN LENGTH({t}) >= 16 THEN {piece(15, 2)} ELSE 0 END)"
        ss = f"(CASE WHEN LENGTH({t}) = 19 THEN {piece(18, 2)} ELSE 0 END)"
        leap = f"(({_divisible(y, 4)} AND NOT {_divisible(y, 100)}) OR {_divisible(y, 400)})"
        month_days = (
            f"(CASE WHEN {m} IN (4, 6, 9, 11) THEN 30 WHEN {m} = 2 THEN "
            f"(CASE WHEN {leap} THEN 29 ELSE 28 END) ELSE 31 END)"
        )
        plain = (
            f"({d.matches(t, PLAIN_ISO)} AND {y} BETWEEN {_NS_YEARS[0]} AND {_NS_YEARS[1]} "
            f"AND {m} BETWEEN 1 AND 12 AND {day} >= 1 AND {day} <= {month_days} "
            f"AND {hh} <= 23 AND {mi} <= 59 AND {ss} <= 59)"
        )
        plain = f"(CASE WHEN {self.col} IS NOT NULL AND {plain} THEN 1 ELSE 0 END = 1)"
        odd = self.source.query(
            f"SELECT DISTINCT {text} AS v FROM {self.source.relation} WHERE {self.col} IS NOT "
            f"NULL AND NOT {plain} LIMIT {ODD_TEXTS_LIMIT + 1}"
        )["v"].tolist()
        if len(odd) > ODD_TEXTS_LIMIT:
            raise _refuse(
                self.column,
                f"holds more than {ODD_TEXTS_LIMIT:,} distinct texts that are not plain ISO dates",
            )
        parsed = parse_iso_texts([str(v).strip() for v in odd], roles.day_first)
        self.failing = [v for v, p in zip(odd, parsed, strict=True) if np.isnat(p)]
        found = [(v, p) for v, p in zip(odd, parsed, strict=True) if not np.isnat(p)]
        lookup = " ".join(
            f"WHEN {literal(v)} THEN {number(float(p.astype('int64')))}" for v, p in found
        )
        other = f"(CASE {text} {lookup} END)" if found else "NULL"
        seconds = civil_seconds(y, m, day, hh, mi, ss)
        return f"(CASE WHEN {plain} THEN {seconds} ELSE {other} END)"


def dates_in_sql(
    source, sample: pd.DataFrame, roles: Roles, notes: list[str], *, rows=None
) -> DatesInSql:
    """The duration from the start and end dates, the exclusion conditions, and the notes
    ``checks._time_in_unit`` gives (appended to ``notes``), or the same errors. ``rows`` is the
    source in the rows' own order where ``source`` reads merged cells (the first dates of a
    column, read for the day/month order, are those of the file)."""
    d = source.dialect
    start = _DateColumn(source, sample, roles.start, roles)
    end = _DateColumn(source, sample, roles.end, roles)
    s, e = SECONDS["start"], SECONDS["end"]
    relation = (
        f"(SELECT *, {start.seconds} AS {s}, {end.seconds} AS {e} FROM {source.relation}) AS dated"
    )
    earliest = float(EARLIEST_PLAUSIBLE.astype("int64"))
    tomorrow = datetime.date.today() + datetime.timedelta(days=1)
    latest = float(np.datetime64(tomorrow, "s").astype("int64"))
    odd = {c: f"({c} < {number(earliest)} OR {c} >= {number(latest)})" for c in (s, e)}
    either = f"({odd[s]} OR {odd[e]})"
    columns = {"start": (start, s), "end": (end, e)}
    totals = []
    for name, (date, seconds) in columns.items():
        totals += [
            f"{source.count(date.col)} AS present_{name}",
            f"{source.count(seconds)} AS parsed_{name}",
            f"COUNT(DISTINCT {d.text(date.col)}) AS distinct_{name}",
            f"{source.rows_where(odd[seconds])} AS odd_{name}",
        ]
    totals.append(f"{source.rows_where(either)} AS odd_rows")
    row = source.query(f"SELECT {', '.join(totals)} FROM {relation}").iloc[0]
    for name, (date, _) in columns.items():
        if int(row[f"present_{name}"]) and not int(row[f"parsed_{name}"]):
            _raise_unreadable(sample[date.column], int(row[f"distinct_{name}"]))
    for date, _ in columns.values():
        _check_other_order(date, roles)
    conditions = [
        (f"({start.col} IS NULL OR {end.col} IS NULL)", MISSING_TIME),
        (f"({s} IS NULL OR {e} IS NULL)", UNPARSEABLE_DATE),
    ]
    odd_rows = counted(row["odd_rows"])
    if odd_rows:
        excluding = roles.implausible_dates == "exclude"
        if excluding:
            conditions.append((either, IMPLAUSIBLE_DATE))
        counts, examples = {}, []
        for name, (date, seconds) in columns.items():
            count = counted(row[f"odd_{name}"])
            if count and date.column not in counts:
                counts[date.column] = count
                first = source.query(
                    f"SELECT DISTINCT {seconds} AS v FROM {relation} WHERE {odd[seconds]} "
                    "ORDER BY 1 LIMIT 3"
                )["v"]
                examples += [np.datetime64(int(v), "s") for v in first]
        notes.append(implausible_text(counts, examples, odd_rows, excluding))
    conditions.append((f"({e} < {s})", END_BEFORE_START))
    if not roles.day_first:
        notes.extend(_ambiguous_date_notes(_first_texts(rows or source, (start, end)), roles))
    days = f"(({e} - {s}) / {number(86400.0)})"
    factor = TIME_UNITS["days"] / TIME_UNITS[roles.unit]
    time = days if roles.unit == "days" else f"({days} * {number(factor)})"
    return DatesInSql(relation, time, tuple(conditions))


def _raise_unreadable(series: pd.Series, distinct: int) -> None:
    """``checks._dates``'s error: no value of the column reads as a date."""
    shown = list(series.dropna().unique()[:5])
    listed = shown + [None] * max(distinct - len(shown), 0)
    raise RoleError(
        f"No value of the date column {series.name!r} could be read as a date with the automatic "
        f"format (values such as {preview_values(listed)}). Give the date format, e.g. %d/%m/%Y.",
        column=str(series.name),
        values=shown,
    )


def _check_other_order(date: _DateColumn, roles: Roles) -> None:
    """Memory warns when failing dates read in the other day/month order; that depends on the
    rows' order, so a column where any failing text would read so is refused."""
    rescued = [
        v
        for v in date.failing
        if not np.isnat(parse_dates(pd.Series([v], dtype=object), None, not roles.day_first)[0])
    ]
    if rescued:
        order = "month" if roles.day_first else "day"
        raise _refuse(
            date.column,
            f"holds texts such as {preview_values(rescued, 3)} that read only {order} first",
        )


def _first_texts(source, columns) -> dict:
    """The first non-empty values of each text date column, as ``checks._ambiguous_date_notes``
    reads them (the database's order: a file's order for files)."""
    out = {}
    for date in columns:
        if date.is_text:
            values = source.query(
                f"SELECT {source.dialect.text(date.col)} AS v FROM {source.relation} "
                f"WHERE {date.col} IS NOT NULL LIMIT {AMBIGUOUS_ROWS}"
            )["v"]
            out[date.column] = pd.Series(values.to_numpy(dtype=object), dtype=object)
        else:
            out[date.column] = pd.Series([], dtype="datetime64[s]")
    return out
