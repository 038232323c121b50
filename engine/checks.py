"""Validate roles once and build the prepared analysis frame, counting every excluded row.

``prepare`` is the boundary: after it, estimators trust ``_time >= 0``, ``_event`` in {0, 1} and
categoricals whose first level is the reference. No row disappears without a reason in the report.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from engine.errors import EventCodingError, RoleError, preview_values
from engine.roles import (
    TIME_UNITS,
    EventCoding,
    Roles,
    classify_covariates,
    convert_time,
    describe_event,
    natural_sort_key,
    value_key,
)

# Exclusion reasons, in the order they are tested (a row counts under its first reason).
MISSING_TIME = "missing time"
NON_NUMERIC_TIME = "non-numeric time"
UNPARSEABLE_DATE = "unparseable date"
NEGATIVE_TIME = "negative time"
END_BEFORE_START = "end before start"
MISSING_EVENT = "missing event"
UNKNOWN_EVENT = "unknown event value"
MISSING_ENTRY = "missing entry time"
ENTRY_AFTER_EXIT = "entry after time"
MISSING_COVARIATE = "missing covariate"
REASONS = (
    MISSING_TIME,
    NON_NUMERIC_TIME,
    UNPARSEABLE_DATE,
    NEGATIVE_TIME,
    END_BEFORE_START,
    MISSING_EVENT,
    UNKNOWN_EVENT,
    MISSING_ENTRY,
    ENTRY_AFTER_EXIT,
    MISSING_COVARIATE,
)
FEW_EVENTS = 10  # common practice: fewer than ~10 events per group gives unstable estimates
TINY_GROUP = 5
REASON_COLUMN = "_reason"


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

    def to_dict(self) -> dict:
        """The ``data`` object of the JSON contract (schema 1); keys are fixed."""
        return {
            "rows_read": int(self.rows_read),
            "rows_used": int(self.rows_used),
            "events": int(self.events),
            "censored": int(self.censored),
            "time_unit": self.time_unit,
            "excluded": [{"reason": r, "rows": int(n)} for r, n in self.excluded],
            "warnings": list(self.warnings),
        }

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


def prepare(frame: pd.DataFrame, roles: Roles, *, require_covariates: bool = False) -> PreparedData:
    """Validate ``roles`` against ``frame`` and build the prepared frame."""
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
        entry = _numbers(frame[roles.entry], roles.entry, "entry time")
        entry = convert_time(entry, roles.duration_unit, roles.unit)
        exclude(np.isnan(entry), MISSING_ENTRY)
        with np.errstate(invalid="ignore"):
            exclude(entry > time, ENTRY_AFTER_EXIT)
        out["_entry"] = entry
    kinds = classify_covariates(frame, roles)
    covariates = {}
    for column in roles.covariates:
        values, missing = _covariate(frame[column], column, kinds[column], roles)
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
    prepared = pd.DataFrame(index=frame.index[used])
    prepared["_time"] = time[used]
    prepared["_event"] = event[used].astype(np.int64)
    if cause is not None:
        prepared["_cause"] = cause[used]
    for role, column in (("_group", roles.group), ("_strata", roles.strata)):
        if column:
            prepared[role] = _natural_categorical(frame[column])[used]
    if roles.entry:
        prepared["_entry"] = out["_entry"][used]
    if roles.id:
        prepared["_id"] = frame[roles.id].to_numpy()[used]
    for column, values in covariates.items():
        prepared[column] = values[used]

    group_counts = _group_counts(prepared)
    notes.extend(_warnings_on_used(prepared, frame, roles, time[used], group_counts))
    counts = np.bincount(reason[~used], minlength=len(REASONS)) if (~used).any() else []
    excluded = tuple((REASONS[i], int(c)) for i, c in enumerate(counts) if c)
    excluded_rows = frame.loc[~used].copy()
    excluded_rows.insert(0, REASON_COLUMN, [REASONS[i] for i in reason[~used]])
    events = int(prepared["_event"].sum())
    report = DataReport(
        rows_read=n,
        rows_used=int(used.sum()),
        events=events,
        censored=int(used.sum()) - events,
        time_unit=roles.unit,
        excluded=excluded,
        warnings=tuple(notes),
        group_counts=group_counts,
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
        values = _numbers(raw, roles.time, "time")
        missing = raw.isna().to_numpy()
        exclude(missing, MISSING_TIME)
        exclude(np.isnan(values) & ~missing, NON_NUMERIC_TIME)
        with np.errstate(invalid="ignore"):
            exclude(values < 0, NEGATIVE_TIME)
        return convert_time(values, roles.duration_unit, roles.unit)
    start = _dates(frame[roles.start], roles)
    end = _dates(frame[roles.end], roles)
    missing = (frame[roles.start].isna() | frame[roles.end].isna()).to_numpy()
    exclude(missing, MISSING_TIME)
    exclude(np.isnat(start) | np.isnat(end), UNPARSEABLE_DATE)
    days = (end - start) / np.timedelta64(1, "D")
    with np.errstate(invalid="ignore"):
        exclude(days < 0, END_BEFORE_START)
    if not roles.dayfirst and not roles.date_format:
        notes.extend(_ambiguous_date_notes(frame, roles))
    return convert_time(days, "days", roles.unit)


def _numbers(series: pd.Series, column: str, role: str) -> np.ndarray:
    """Float values; text that is not a number becomes NaN (counted by the caller)."""
    if pd.api.types.is_bool_dtype(series):
        raise RoleError(
            f"The {role} column {column!r} holds true/false values, not numbers.", column=column
        )
    if pd.api.types.is_numeric_dtype(series):
        return series.to_numpy(dtype=float, na_value=np.nan)
    if pd.api.types.is_datetime64_any_dtype(series):
        raise RoleError(
            f"The {role} column {column!r} holds dates ({preview_values(series.head(3))}). "
            "Use start and end date columns instead of a duration column.",
            column=column,
        )
    text = series.astype("string").str.strip().str.replace(",", ".", regex=False)
    values = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
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
    if pd.api.types.is_datetime64_any_dtype(series):
        parsed = series
    else:
        text = series.where(series.isna(), series.astype(str).str.strip())
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)
            parsed = pd.to_datetime(
                text, format=roles.date_format, dayfirst=roles.dayfirst, errors="coerce"
            )
    if getattr(parsed.dt, "tz", None) is not None:
        parsed = parsed.dt.tz_localize(None)
    values = parsed.to_numpy(dtype="datetime64[ns]")
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


def _ambiguous_date_notes(frame, roles: Roles) -> list[str]:
    for column in (roles.start, roles.end):
        series = frame[column]
        if pd.api.types.is_datetime64_any_dtype(series) or series.dtype != object:
            continue
        parts = (
            series.dropna()
            .astype(str)
            .head(5000)
            .str.extract(r"^\s*(\d{1,2})[/.\-](\d{1,2})[/.\-]\d{2,4}")
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
    chosen = tuple(roles.event_values)
    if not chosen and roles.event_causes:
        chosen = tuple(v for v, name in roles.event_causes if name == roles.event_causes[0][1])
    coding = describe_event(series, chosen)
    column = roles.event
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
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    events = {value_key(v) for v in coding.event_values}
    censored = {value_key(v) for v in coding.censored_values}
    keys = [value_key(v) for v in uniques]
    lookup = np.array(
        [1 if k in events else 0 if k in censored else -2 for k in keys] + [-1], dtype=np.int8
    )
    event = lookup[codes]  # code -1 (missing) picks the last entry
    if chosen and len(coding.censored_values) > 1:
        notes.append(
            f"Event column {column!r}: {preview_values(coding.censored_values)} are all treated "
            "as censored (not named as event values)."
        )
    if coding.assumption:
        notes.append(coding.assumption)
    cause = None
    if roles.event_causes:
        names = {value_key(v): name for v, name in roles.event_causes}
        cause_lookup = np.array([names.get(k) for k in keys] + [None], dtype=object)
        cause = cause_lookup[codes]
        cause[event < 0] = None  # competing causes keep their name with _event == 0
        missing_cause = (event == 1) & pd.isna(cause)
        cause[missing_cause] = "event"
    return event, cause, coding


def _counts_text(coding: EventCoding) -> str:
    shown = [f"{v!r} ({c} row{'' if c == 1 else 's'})" for v, c in coding.counts[:8]]
    rest = len(coding.counts) - 8
    return ", ".join(shown) + (f" and {rest} more" if rest > 0 else "")


# --- covariates and groups ----------------------------------------------------------------------


def _covariate(series: pd.Series, column: str, kind: str, roles: Roles):
    if kind == "numeric" or (kind == "possibly categorical" and column not in roles.categorical):
        values = _numbers(series, column, "covariate")
        return values, np.isnan(values)
    reference = roles.reference_for(column)
    categorical = _natural_categorical(series, reference, column)
    return categorical, np.asarray(categorical.codes) < 0


def _natural_categorical(series: pd.Series, reference=None, column: str | None = None):
    """Categorical with levels in natural order, the reference level (if any) first."""
    codes, uniques = pd.factorize(series, use_na_sentinel=True, sort=False)
    levels = list(uniques)
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


# --- warnings -----------------------------------------------------------------------------------


def _group_counts(prepared: pd.DataFrame) -> pd.DataFrame:
    event = prepared["_event"]
    if "_group" in prepared:
        grouped = event.groupby(prepared["_group"], observed=False)
        table = pd.DataFrame({"n": grouped.size(), "events": grouped.sum()})
        table.index = table.index.astype(object)
    else:
        table = pd.DataFrame({"n": [len(event)], "events": [int(event.sum())]}, index=["all"])
    table["censored"] = table["n"] - table["events"]
    table = table.rename_axis("group").reset_index()
    return table.astype({"n": "int64", "events": "int64", "censored": "int64"})


def _warnings_on_used(prepared, frame, roles: Roles, time, group_counts) -> list[str]:
    notes = []
    zeros = int((time == 0).sum())
    if zeros:
        notes.append(
            f"{zeros} row(s) have time 0; they are kept, but check whether they are real "
            "(an event on the first day) or data-entry placeholders."
        )
    if roles.time and len(time):
        notes.extend(_unit_hints(time, roles))
    if len(prepared) and prepared["_event"].sum() == 0:
        notes.append("There are no events among the rows used; curves stay at 1.")
    if roles.group:
        for _, row in group_counts.iterrows():
            label = row["group"]
            if row["n"] < TINY_GROUP:
                notes.append(f"Group {label!r} has only {row['n']} row(s).")
            elif row["events"] < FEW_EVENTS:
                notes.append(
                    f"Group {label!r} has {row['events']} event(s); with fewer than "
                    f"{FEW_EVENTS} events its estimates are unstable (common practice rule)."
                )
        no_group = int(prepared["_group"].isna().sum())
        if no_group:
            notes.append(
                f"{no_group} row(s) have no value in the group column {roles.group!r}; they "
                "appear in overall results but in no group."
            )
    if roles.id:
        ids = frame[roles.id]
        duplicated = ids[ids.duplicated(keep=False) & ids.notna()]
        if len(duplicated):
            notes.append(
                f"Column {roles.id!r} repeats {duplicated.nunique()} id(s) "
                f"({preview_values(duplicated.unique())}); each subject should appear once."
            )
    return notes


def _unit_hints(time: np.ndarray, roles: Roles) -> list[str]:
    """Heuristic hints (rules of thumb) that the duration column is in another unit."""
    unit = roles.duration_unit
    raw = convert_time(time, roles.unit, unit)
    top = float(np.nanmax(raw)) if len(raw) else 0.0
    whole = bool(np.all(np.mod(raw, 1) == 0))
    if unit == "days" and whole and top < 120:
        return [
            f"All times are whole numbers below 120 (largest {top:g}); if they are weeks or "
            "months rather than days, set the unit of the time column."
        ]
    if unit == "days" and not whole and top <= 40:
        return [
            f"Times are fractional and at most {top:g}; if they are years or months rather "
            "than days, set the unit of the time column."
        ]
    if unit == "years" and top > 100:
        return [
            f"Times reach {top:g} years; if they are days or months, set the unit of the "
            "time column."
        ]
    return []
