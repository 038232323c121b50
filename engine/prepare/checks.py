"""Validate roles once and build the prepared analysis frame, counting every excluded row.

``prepare`` is the boundary: after it, estimators trust ``_time >= 0``, ``_event`` in {0, 1} and
categoricals whose first level is the reference. No row disappears without a reason in the report.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from engine.errors import EventCodingError, RoleError, preview_values, shown_value
from engine.prepare.column_kinds import MAX_LEVELS, natural_sort_key, numbers_in_text
from engine.prepare.data_warnings import group_counts, warnings_on_used
from engine.prepare.dates import (
    check_date_format,
    check_implausible_choice,
    duration_days,
    implausible,
    implausible_note,
    parse_dates,
)
from engine.prepare.roles import (
    TIME_UNITS,
    EventCoding,
    Roles,
    classify_covariates,
    convert_time,
    describe_event_counts,
    seconds_in_unit,
    value_key,
)

# Exclusion reasons, in the order they are tested (a row counts under its first reason).
MISSING_TIME = "missing time"
NON_NUMERIC_TIME = "non-numeric time"
TIME_NOT_FINITE = "time not finite"  # an infinite duration or entry time
UNPARSEABLE_DATE = "unparseable date"
IMPLAUSIBLE_DATE = "implausible date"  # only when roles.implausible_dates == "exclude"
NEGATIVE_TIME = "negative time"
END_BEFORE_START = "end before start"
MISSING_EVENT = "missing event"
UNKNOWN_EVENT = "unknown event value"
MISSING_ENTRY = "missing entry time"
ENTRY_AFTER_EXIT = "entry not before time"  # at risk only for entry < t <= time: none
MISSING_COVARIATE = "missing covariate"
MALFORMED_LINE = "malformed line"
REASONS = (
    MALFORMED_LINE,
    MISSING_TIME,
    NON_NUMERIC_TIME,
    TIME_NOT_FINITE,
    UNPARSEABLE_DATE,
    IMPLAUSIBLE_DATE,
    NEGATIVE_TIME,
    END_BEFORE_START,
    MISSING_EVENT,
    UNKNOWN_EVENT,
    MISSING_ENTRY,
    ENTRY_AFTER_EXIT,
    MISSING_COVARIATE,
)
REASON_COLUMN = "_reason"
RAW_LINE_COLUMN = "_raw_line"  # the text of a malformed line, in ``excluded_rows``


@dataclass(frozen=True, eq=False)
class DataReport:
    """What happened to every row between the file and the analysis."""

    rows_read: int
    rows_used: int
    events: int
    censored: int
    time_unit: str
    excluded: tuple[tuple[str, int], ...]
    warnings: tuple[str, ...]
    group_counts: pd.DataFrame
    event_coding: EventCoding | None = None
    covariate_kinds: dict = field(default_factory=dict)
    # Rows whose event was a competing cause (named causes only); not counted in `censored`.
    competing_events: int = 0

    def to_dict(self) -> dict:
        """The ``data`` object of the JSON contract (schema 2); keys are fixed. ``events`` +
        ``competing_events`` + ``censored`` = ``rows_used``."""
        return {
            "rows_read": int(self.rows_read),
            "rows_used": int(self.rows_used),
            "events": int(self.events),
            "competing_events": int(self.competing_events),
            "censored": int(self.censored),
            "time_unit": self.time_unit,
            "excluded": [{"reason": r, "rows": int(n)} for r, n in self.excluded],
            "warnings": list(self.warnings),
        }

    def no_usable_rows(self) -> str | None:
        """Why nothing can be analysed, in words with the exclusion counts; None when some row
        is usable."""
        if self.rows_used:
            return None
        if not self.rows_read:
            return "No row is usable: the data hold no rows."
        reasons = "; ".join(f"{reason}: {rows:,}" for reason, rows in self.excluded)
        return (
            f"No row is usable: all {self.rows_read:,} row(s) read were excluded ({reasons}). "
            "Correct the data or the roles; the data report lists the excluded rows."
        )

    def to_frame(self) -> pd.DataFrame:
        """Excluded rows by reason."""
        return pd.DataFrame(list(self.excluded), columns=["reason", "rows"])


@dataclass(frozen=True, eq=False)
class PreparedData:
    """The analysis frame (columns per DEVELOPERS.md), its report and the rows left out."""

    frame: pd.DataFrame
    roles: Roles
    report: DataReport
    excluded_rows: pd.DataFrame  # original columns of excluded rows plus ``_reason``


def prepare(
    frame: pd.DataFrame,
    roles: Roles,
    *,
    require_covariates: bool = False,
    malformed_lines: Sequence[str] = (),
) -> PreparedData:
    """Validate ``roles`` against ``frame`` and build the prepared frame.

    ``malformed_lines`` are the file's lines the reader skipped (``ImportedTable.malformed_lines``):
    they count as rows read and excluded, so the report accounts for every line of the file.
    """
    _validate_roles(frame, roles)
    n = len(frame)
    reason = np.full(n, -1, dtype=np.int8)
    notes: list[str] = []

    def exclude(mask: np.ndarray, name: str) -> None:
        reason[(reason < 0) & mask] = REASONS.index(name)

    time = _time_in_unit(frame, roles, exclude, notes)
    event, cause, coding = _event_codes(frame, roles, notes)
    exclude(event == -1, MISSING_EVENT)
    exclude(event == -2, UNKNOWN_EVENT)
    out: dict[str, object] = {}
    if roles.entry:
        entry = _numbers(frame[roles.entry], roles.entry, "entry time", roles.duration_unit)
        with np.errstate(over="ignore"):
            entry = convert_time(entry, roles.duration_unit, roles.unit)
        exclude(np.isnan(entry), MISSING_ENTRY)
        exclude(np.isinf(entry), TIME_NOT_FINITE)
        with np.errstate(invalid="ignore"):
            exclude(entry >= time, ENTRY_AFTER_EXIT)
        out["_entry"] = entry
    kinds = classify_covariates(frame, roles)
    covariates = {}
    for column in roles.covariates:
        if kinds[column] != "categorical" and roles.reference_for(column) is not None:
            raise RoleError(
                f"A reference level is given for {column!r}, which is treated as numeric; "
                "add it to the categorical covariates or drop the reference.",
                column=column,
            )
        values, missing = _covariate(frame[column], column, kinds[column], roles, notes)
        covariates[column] = values
        if require_covariates:
            exclude(missing, MISSING_COVARIATE)
        elif missing.any():
            notes.append(
                f"Covariate {column!r} is missing in {int(missing.sum())} row(s); a model leaves "
                "those rows out."
            )
        if kinds[column] == "possibly categorical" and column not in roles.categorical:
            notes.append(
                f"Covariate {column!r} is numeric with few distinct values; if it is a coded "
                "category, mark it categorical."
            )

    used = reason < 0
    everything = bool(used.all())

    def kept(values):
        return values if everything else values[used]

    columns = {"_time": kept(time), "_event": kept(event).astype(np.int64)}
    if cause is not None:
        columns["_cause"] = kept(cause)
    for role, column in (("_group", roles.group), ("_strata", roles.strata)):
        if column:
            what = f"group column {column!r}" if role == "_group" else ""
            columns[role] = kept(_natural_categorical(frame[column], role=what))
    if roles.entry:
        columns["_entry"] = kept(out["_entry"])
    if roles.id:
        columns["_id"] = frame[roles.id].to_numpy(copy=True)[used]
    for column, values in covariates.items():
        columns[column] = kept(values)
    # Every array above is new (computed or masked), so the frame need not copy them again.
    prepared = pd.DataFrame(columns, index=frame.index[used], copy=False)

    counts_by_group = group_counts(prepared)
    notes.extend(warnings_on_used(prepared, frame, roles, time[used], counts_by_group))
    counts = np.bincount(reason[~used], minlength=len(REASONS))
    counts[REASONS.index(MALFORMED_LINE)] = len(malformed_lines)
    excluded = tuple((REASONS[i], int(c)) for i, c in enumerate(counts) if c)
    excluded_rows = frame.iloc[:0].copy() if everything else frame.loc[~used].copy()
    excluded_rows.insert(0, REASON_COLUMN, [REASONS[i] for i in reason[~used]])
    if malformed_lines:
        skipped = pd.DataFrame({REASON_COLUMN: MALFORMED_LINE, RAW_LINE_COLUMN: malformed_lines})
        excluded_rows = pd.concat([skipped, excluded_rows], ignore_index=True)
    events = int(prepared["_event"].sum())
    competing = _competing_events(prepared)
    report = DataReport(
        rows_read=n + len(malformed_lines),
        rows_used=int(used.sum()),
        events=events,
        censored=int(used.sum()) - events - competing,
        competing_events=competing,
        time_unit=roles.unit,
        excluded=excluded,
        warnings=tuple(notes),
        group_counts=counts_by_group,
        event_coding=coding,
        covariate_kinds=kinds,
    )
    return PreparedData(prepared, roles, report, excluded_rows)


# --- roles --------------------------------------------------------------------------------------


def _validate_roles(frame: pd.DataFrame, roles: Roles) -> None:
    columns = [str(c) for c in frame.columns]
    named = {
        "time": roles.time,
        "start": roles.start,
        "end": roles.end,
        "event": roles.event,
        "group": roles.group,
        "strata": roles.strata,
        "entry": roles.entry,
        "id": roles.id,
    }
    named.update({f"covariate {c!r}": c for c in roles.covariates})
    for role, column in named.items():
        if column is not None and column not in columns:
            raise RoleError(
                f"The {role} column {column!r} is not in the data. Columns are: "
                f"{preview_values(columns, 12)}.",
                column=column,
                values=[column],
            )
    for column in roles.categorical:
        if column not in roles.covariates:
            raise RoleError(
                f"{column!r} is marked categorical but is not a covariate; add it to the "
                "covariates or remove it from the categorical list.",
                column=column,
            )
    for column, _level in roles.reference:
        if column not in roles.covariates:
            raise RoleError(
                f"A reference level is given for {column!r}, which is not a covariate.",
                column=column,
            )
    if roles.start or roles.end:
        check_date_format(roles.date_format)
    check_implausible_choice(roles.implausible_dates)
    if roles.time and (roles.start or roles.end):
        raise RoleError("Give either a time column or start and end date columns, not both.")
    if not roles.time and not (roles.start and roles.end):
        raise RoleError(
            "No time given: choose a duration column, or both a start-date and an end-date column."
        )
    for unit in (roles.unit, roles.source_unit):
        if unit is not None and unit not in TIME_UNITS:
            raise RoleError(
                f"Unknown time unit {unit!r}; use one of {', '.join(TIME_UNITS)}.", values=[unit]
            )
    single = [c for c in (roles.time, roles.start, roles.end, roles.event) if c]
    clashes = sorted({c for c in single if single.count(c) > 1})
    clashes += sorted(set(single) & set(roles.covariates))
    if clashes:
        raise RoleError(
            f"Column {clashes[0]!r} is given more than one role (time, event, covariate); "
            "each of these needs its own column.",
            column=clashes[0],
        )


# --- time ---------------------------------------------------------------------------------------


def _time_in_unit(frame, roles: Roles, exclude, notes: list[str]) -> np.ndarray:
    if roles.time:
        raw = frame[roles.time]
        values = _numbers(raw, roles.time, "time", roles.duration_unit)
        missing = raw.isna().to_numpy()
        exclude(missing, MISSING_TIME)
        exclude(np.isnan(values) & ~missing, NON_NUMERIC_TIME)
        with np.errstate(over="ignore"):
            converted = convert_time(values, roles.duration_unit, roles.unit)
        # infinite in the unit of the analysis (1e308 years is beyond the double range in days)
        exclude(np.isinf(converted), TIME_NOT_FINITE)
        with np.errstate(invalid="ignore"):
            exclude(values < 0, NEGATIVE_TIME)
        return converted
    start = _dates(frame[roles.start], roles)
    end = _dates(frame[roles.end], roles)
    missing = (frame[roles.start].isna() | frame[roles.end].isna()).to_numpy()
    exclude(missing, MISSING_TIME)
    exclude(np.isnat(start) | np.isnat(end), UNPARSEABLE_DATE)
    if not roles.date_format:
        for column, parsed in ((roles.start, start), (roles.end, end)):
            notes.extend(_other_order_notes(frame[column], parsed, roles))
    odd = implausible(start) | implausible(end)
    if odd.any():
        excluding = roles.implausible_dates == "exclude"
        if excluding:
            exclude(odd, IMPLAUSIBLE_DATE)
        dates = {roles.start: start, roles.end: end}
        notes.append(implausible_note(dates, int(odd.sum()), excluding))
    days = duration_days(start, end)
    with np.errstate(invalid="ignore"):
        exclude(days < 0, END_BEFORE_START)
    if not roles.day_first and not roles.date_format:
        notes.extend(_ambiguous_date_notes(frame, roles))
    return convert_time(days, "days", roles.unit)


def _numbers(series: pd.Series, column: str, role: str, unit: str | None = None) -> np.ndarray:
    """Float values; text that is not a number becomes NaN (counted by the caller). A duration
    (timedelta) column of a time role is its span in ``unit``, the unit of its values."""
    if unit is not None and pd.api.types.is_timedelta64_dtype(series):
        seconds = series.dt.total_seconds().to_numpy(dtype=float, na_value=np.nan)
        return seconds_in_unit(seconds, unit)
    if pd.api.types.is_bool_dtype(series):
        raise RoleError(
            f"The {role} column {column!r} holds true/false values, not numbers.", column=column
        )
    if pd.api.types.is_numeric_dtype(series):
        return series.to_numpy(dtype=float, na_value=np.nan, copy=True)
    if pd.api.types.is_datetime64_any_dtype(series):
        raise RoleError(
            f"The {role} column {column!r} holds dates ({preview_values(series.head(3))}). "
            "Use start and end date columns instead of a duration column.",
            column=column,
        )
    values = numbers_in_text(series)
    present = series.notna().to_numpy()
    if present.any() and np.isnan(values[present]).all():
        raise RoleError(
            f"The {role} column {column!r} holds no numbers (values such as "
            f"{preview_values(series[present].unique())}). Choose a numeric column, or use "
            "start and end date columns if it holds dates.",
            column=column,
            values=list(series[present].unique()[:5]),
        )
    return values


def _dates(series: pd.Series, roles: Roles) -> np.ndarray:
    """``datetime64[s]`` per row: see ``engine.prepare.dates`` (no nanosecond range limit)."""
    values = parse_dates(series, roles.date_format, roles.day_first)
    present = series.notna().to_numpy()
    if present.any() and np.isnat(values[present]).all():
        shown = preview_values(series[present].unique())
        hint = f"format {roles.date_format!r}" if roles.date_format else "the automatic format"
        raise RoleError(
            f"No value of the date column {series.name!r} could be read as a date with {hint} "
            f"(values such as {shown}). Give the date format, e.g. %d/%m/%Y.",
            column=str(series.name),
            values=list(series[present].unique()[:5]),
        )
    return values


def _other_order_notes(series: pd.Series, parsed: np.ndarray, roles: Roles) -> list[str]:
    """A warning when dates that failed in the order used (month first, or day first) would
    be read in the other order, naming the switch that reads them (app and command line)."""
    failing = series.notna().to_numpy() & np.isnat(parsed)
    if not failing.any() or pd.api.types.is_datetime64_any_dtype(series):
        return []
    other = replace(roles, day_first=not roles.day_first)
    try:
        rescued = ~np.isnat(_dates(series[failing], other))
    except RoleError:  # none of them reads in the other order either
        return []
    count = int(rescued.sum())
    if count == 0 or count < 0.5 * int(failing.sum()):
        return []
    example = preview_values(series[failing][rescued].unique()[:3])
    used, instead = ("month", "day") if not roles.day_first else ("day", "month")
    fix = (
        "switch on 'Dates are day first' on the Column roles page (command line: --day-first)"
        if not roles.day_first
        else "switch off 'Dates are day first' on the Column roles page (command line: leave "
        "out --day-first)"
    )
    return [
        f"{count:,} date(s) in {series.name!r} (such as {example}) could not be read {used} "
        f"first but can be read {instead} first; they are left out as '{UNPARSEABLE_DATE}'. "
        f"If the dates are written {instead} first, {fix}."
    ]


def _ambiguous_date_notes(frame, roles: Roles) -> list[str]:
    for column in (roles.start, roles.end):
        series = frame[column]
        if pd.api.types.is_datetime64_any_dtype(series) or series.dtype != object:
            continue
        parts = (
            series.dropna()
            .astype(str)
            .head(5000)
            .str.extract(r"^\s*([0-9]{1,2})[/.\-]([0-9]{1,2})[/.\-][0-9]{2,4}")
            .dropna()
        )
        if len(parts) and (parts.astype(int) <= 12).all().all():
            return [
                f"Dates in {column!r} such as {parts.iloc[0, 0]}/{parts.iloc[0, 1]} could be "
                "day-first or month-first; they were read month-first. Set day-first if needed."
            ]
    return []


# --- event --------------------------------------------------------------------------------------


def _event_codes(frame, roles: Roles, notes: list[str]):
    """Per row: 1 event, 0 censored, -1 missing, -2 unknown; plus cause names and the coding."""
    n = len(frame)
    if roles.event is None:
        notes.append("No event column: every row is treated as an event (no censoring).")
        return np.ones(n, dtype=np.int8), None, None
    series = frame[roles.event]
    coding = event_coding(
        roles, series.value_counts(dropna=False, sort=True), notes, column=str(series.name)
    )
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    events = {value_key(v) for v in coding.event_values}
    censored = {value_key(v) for v in coding.censored_values}
    keys = [value_key(v) for v in uniques]
    lookup = np.array(
        [1 if k in events else 0 if k in censored else -2 for k in keys] + [-1], dtype=np.int8
    )
    event = lookup[codes]  # code -1 (missing) picks the last entry
    cause = None
    if roles.event_causes:
        names = {value_key(v): name for v, name in roles.event_causes}
        cause_lookup = np.array([names.get(k) for k in keys] + [None], dtype=object)
        cause = cause_lookup[codes]
        cause[event < 0] = None  # competing causes keep their name with _event == 0
        missing_cause = (event == 1) & pd.isna(cause)
        cause[missing_cause] = "event"
        named = pd.unique(cause[pd.notna(cause)])
        cause = pd.Categorical(cause, categories=roles.cause_order(named))  # the order given
    return event, cause, coding


def event_coding(roles: Roles, counts: pd.Series, notes: list[str], *, column: str):
    """The event coding from the event column's value counts, refusing a coding Hazel cannot
    read; adds the notes on values treated as censored. Shared by the rows in memory and the
    databases (which send only these counts). Values are taken most frequent first, ties in
    natural order (missing last), not in the order a file or a GROUP BY met them."""
    counts = counts.iloc[sorted(range(len(counts)), key=lambda i: _count_order(counts, i))]
    chosen = tuple(roles.event_values)
    if not chosen and roles.event_causes:
        chosen = tuple(v for v, name in roles.event_causes if name == roles.event_causes[0][1])
    coding = describe_event_counts(column, counts, chosen)
    if coding.needs_choice:
        raise EventCodingError(
            f"The event column {column!r} has values {_counts_text(coding)}, which are not a "
            "coding Hazel recognises. Name the value(s) that mean the event.",
            column=column,
            values=[v for v, _ in coding.counts],
        )
    if chosen and not coding.event_values:
        raise EventCodingError(
            f"None of the event values {preview_values(chosen)} occur in column {column!r}; "
            f"its values are {_counts_text(coding)}.",
            column=column,
            values=[v for v, _ in coding.counts],
        )
    cause_keys = {value_key(v) for v, _ in roles.event_causes}
    censored_only = [v for v in coding.censored_values if value_key(v) not in cause_keys]
    if chosen and len(censored_only) > 1:
        notes.append(
            f"Event column {column!r}: {preview_values(censored_only)} are all treated "
            "as censored (not named as event values)."
        )
    if roles.event_values and roles.event_causes:
        notes.extend(_causes_merged_note(roles, coding))
    if coding.assumption:
        notes.append(coding.assumption)
    return coding


def _count_order(counts: pd.Series, i: int) -> tuple:
    value = counts.index[i]
    missing = bool(pd.isna(value))
    return (-counts.iloc[i], missing, () if missing else natural_sort_key(value))


def _causes_merged_note(roles: Roles, coding: EventCoding) -> list[str]:
    """The warning when the event values belong to several causes: the reading used (any of
    them is the event outside the competing-risks section) and how to get the other one."""
    names = {value_key(v): str(name) for v, name in roles.event_causes}
    merged = roles.cause_order({names.get(value_key(v), "event") for v in coding.event_values})
    if len(merged) < 2:
        return []
    first = merged[0]
    return [
        f"The event values (--event-value; on Column roles, the values chosen as the event) "
        f"belong to {len(merged)} causes named with "
        f"--competing ({', '.join(merged)}): the curves, the comparison, the Cox model and the "
        "performance measures treat any of them as the event, so no row counts as a competing "
        "event there; the competing-risks section still separates the causes. To study "
        f"{first} with the others competing, give only its values as event values (or leave "
        "--event-value out: the first cause named is then the event of interest)."
    ]


def _counts_text(coding: EventCoding) -> str:
    shown = [
        f"{shown_value(v)} ({int(c)} row{'' if c == 1 else 's'})" for v, c in coding.counts[:8]
    ]
    rest = len(coding.counts) - 8
    return ", ".join(shown) + (f" and {rest} more" if rest > 0 else "")


# --- covariates and groups ----------------------------------------------------------------------


def _covariate(series: pd.Series, column: str, kind: str, roles: Roles, notes: list[str]):
    if kind == "numeric" or (kind == "possibly categorical" and column not in roles.categorical):
        values = _numbers(series, column, "covariate")
        not_numbers = ~np.isfinite(values) & series.notna().to_numpy()
        if not_numbers.any():
            values[not_numbers] = np.nan
            notes.append(_not_numbers_note(series, column, not_numbers))
        return values, np.isnan(values)
    reference = roles.reference_for(column)
    categorical = _natural_categorical(series, reference, column)
    return categorical, np.asarray(categorical.codes) < 0


def _not_numbers_note(series: pd.Series, column: str, bad: np.ndarray) -> str:
    """``not_numbers_note`` of the cells of ``series`` where ``bad`` holds."""
    found = series[bad].value_counts(dropna=True, sort=False)
    return not_numbers_note(column, list(zip(found.index, found.to_numpy(), strict=True)))


def not_numbers_note(column: str, found: Sequence[tuple[object, int]]) -> str:
    """Which cells of a numeric covariate are not (finite) numbers: ``found`` holds each such
    value with its number of cells; the first five in natural order are named. Computed from
    counts of values, so the rows in memory and a database's say the same."""
    merged: dict = {}
    values = numbers_in_text(pd.Series([str(v) for v, _ in found], dtype=object))
    for (value, n), read in zip(found, values, strict=True):
        shown = float(read) if np.isinf(read) else value  # '1e400' in text, inf in a number column
        merged[shown] = merged.get(shown, 0) + int(n)
    found = sorted(merged.items(), key=lambda vn: natural_sort_key(vn[0]))
    cells = sum(int(n) for _, n in found)
    shown = [f"{shown_value(v)} in {int(n)} cell(s)" for v, n in found[:5]]
    rest = f" and {len(found) - 5} more value(s)" if len(found) > 5 else ""
    return (
        f"Covariate {column!r} is numeric, but {cells} cell(s) are not finite numbers "
        f"({', '.join(shown)}{rest}); they are treated as missing. Correct them, or mark the "
        "column categorical if it is a category."
    )


def _natural_categorical(series: pd.Series, reference=None, column: str | None = None, *, role=""):
    """Categorical with levels in natural order; for a covariate the reference level comes first.

    The default reference follows ``roles.default_reference`` (most frequent, natural-order tie
    break) but is counted from the codes already at hand rather than hashing the column again.
    More than ``MAX_LEVELS`` levels (a name or id column chosen by mistake) are refused before
    the levels are sorted: each would be a curve or a model term.
    """
    codes, uniques = pd.factorize(series, use_na_sentinel=True, sort=False)
    levels = list(uniques)
    if (column is not None or role) and len(levels) > MAX_LEVELS:
        what = f"categorical covariate {column!r}" if column is not None else role
        raise RoleError(
            f"The {what} has {len(levels):,} distinct values (such as "
            f"{preview_values(levels[:3])}); Hazel allows at most {MAX_LEVELS}, since each value "
            "is a group of its own. Choose a column with fewer values, group rare values "
            "together, or (for numbers) use it as a numeric covariate.",
            column=column or str(series.name),
            values=levels[:5],
        )
    order = sorted(range(len(levels)), key=lambda i: natural_sort_key(levels[i]))
    if column is not None:
        if reference is None:
            counts = np.bincount(codes[codes >= 0], minlength=len(levels))
            top = [i for i in order if counts[i] == counts.max()] if len(levels) else []
            reference_index = top[0] if top else None
        else:
            key = value_key(reference)
            matches = [i for i in order if value_key(levels[i]) == key]
            if not matches:
                raise RoleError(
                    f"Reference level {reference!r} does not occur in column {column!r}; its "
                    f"levels are {preview_values([levels[i] for i in order], 10)}.",
                    column=column,
                    values=[reference],
                )
            reference_index = matches[0]
        if reference_index is not None:
            order.remove(reference_index)
            order.insert(0, reference_index)
    rank = np.empty(len(levels), dtype=np.int64)
    rank[order] = np.arange(len(levels))
    new_codes = np.where(codes >= 0, rank[codes] if len(levels) else codes, -1)
    categories = pd.Index([levels[i] for i in order], dtype=object)
    return pd.Categorical.from_codes(new_codes, categories=categories)


def _competing_events(prepared: pd.DataFrame) -> int:
    if "_cause" not in prepared.columns:
        return 0
    return int((prepared["_cause"].notna() & (prepared["_event"] == 0)).sum())
