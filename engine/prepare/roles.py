"""Column roles: which column is the time, the event, the group, the covariates.

Roles are declared once (``Roles``) and validated at the boundary by
``engine.prepare.checks.prepare``.
This module also reads event codings, converts time units and proposes roles from column names and
contents; proposals are returned to the caller and never applied.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, fields

import numpy as np
import pandas as pd

from engine.errors import RoleError
from engine.prepare.column_kinds import FEW_DISTINCT as FEW_DISTINCT
from engine.prepare.column_kinds import MAX_LEVELS as MAX_LEVELS
from engine.prepare.column_kinds import ColumnProfile, covariate_kind, guess_day_first
from engine.prepare.column_kinds import default_reference as default_reference
from engine.prepare.column_kinds import mostly_numbers as mostly_numbers
from engine.prepare.column_kinds import natural_sort_key as natural_sort_key
from engine.prepare.column_kinds import numbers_in_text as numbers_in_text

TIME_UNITS: dict[str, float] = {"days": 1.0, "weeks": 7.0, "months": 30.4375, "years": 365.25}

EVENT_WORDS = frozenset(
    {
        "1", "true", "t", "yes", "y", "event", "dead", "died", "death", "deceased", "relapse",
        "relapsed", "recurrence", "recurred", "progression", "progressed", "failure", "failed",
        "fail", "failed part", "broken", "occurred", "case", "positive",
    }
)  # fmt: skip
CENSORED_WORDS = frozenset(
    {
        "0", "false", "f", "no", "n", "censored", "censor", "cens", "alive", "living",
        "survived", "event-free", "event free", "no event", "none", "lost", "lost to follow-up",
        "lost to follow up", "withdrawn", "ongoing", "working", "in service", "negative",
    }
)  # fmt: skip
ONE_TWO_ASSUMPTION = (
    "Assumed 1 = censored and 2 = event (a common coding for 1/2 columns). "
    "If your file means otherwise, name the event value explicitly."
)

_TIME_NAMES = re.compile(
    r"(^|_)(time|times|duration|follow|fu|futime|survival|surv|os|pfs|dfs|efs|months|days|"
    r"weeks|years|time_to|stime|t)($|_)",
    re.I,
)
_START_NAMES = re.compile(
    r"(start|entry|enrol|enroll|random|diagnos|dx|baseline|install|begin|admission|inclusion)",
    re.I,
)
_END_NAMES = re.compile(
    r"(end|exit|last|death|event_date|stop|fail|censor|followup|follow_up|removal|outcome_date)",
    re.I,
)
_EVENT_NAMES = re.compile(
    r"(^|_)(event|status|dead|death|died|censor|cens|outcome|fail|failure|relapse|delta|d|"
    r"vital|fstat|state)($|_)",
    re.I,
)
_GROUP_NAMES = re.compile(
    r"(^|_)(group|arm|treatment|trt|tx|cohort|batch|line|site|type)($|_)", re.I
)
_ID_NAMES = re.compile(r"(^|_)(id|identifier|patient|subject|serial|record|key|no)($|_)", re.I)
_UNIT_NAMES = {
    "days": r"days?",
    "weeks": r"weeks?|wks?",
    "months": r"months?|mo",
    "years": r"years?",
}


def seconds_in_unit(seconds, unit: str):
    """A time span stored as a duration (Parquet ``duration``, a pandas timedelta), given in
    seconds, as a number of ``unit``: the reading of a duration column on every backend."""
    return seconds / (TIME_UNITS[unit] * 86400.0)


def convert_time(values, from_unit: str, to_unit: str):
    """Convert durations between days, weeks, months (30.4375 days) and years (365.25 days)."""
    for unit in (from_unit, to_unit):
        if unit not in TIME_UNITS:
            raise RoleError(
                f"Unknown time unit {unit!r}; use one of {', '.join(TIME_UNITS)}.", values=[unit]
            )
    if from_unit == to_unit:
        return values
    return values * (TIME_UNITS[from_unit] / TIME_UNITS[to_unit])


def value_key(value) -> str | None:
    """A comparable key for a cell: 1, 1.0, '1' and ' 1 ' match; text is case-insensitive."""
    if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
        return None
    if isinstance(value, bool | np.bool_):
        return "true" if value else "false"
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, float | np.floating):
        return str(int(value)) if float(value).is_integer() else repr(float(value))
    text = str(value).strip()
    try:
        number = float(text)
    except ValueError:
        return text.casefold()
    if math.isfinite(number):
        return value_key(number)
    return text.casefold()


@dataclass(frozen=True)
class Roles:
    """Which column plays which part. Nothing here is inferred: see ``suggest_roles``."""

    time: str | None = None
    start: str | None = None
    end: str | None = None
    date_format: str | None = None
    day_first: bool = False
    unit: str = "days"
    source_unit: str | None = None
    event: str | None = None
    event_values: tuple = ()  # empty: recognise the coding (0/1, yes/no, dead/alive...)
    # The event in words for titles and sentences ("relapse"); None: from the event's values
    # or column name (see ``event_in_words``).
    event_name: str | None = None
    # (value, cause name) pairs for competing risks. Without event_values the first cause is the
    # event of interest; rows of other causes keep their name in _cause with _event 0.
    event_causes: tuple[tuple[object, str], ...] = ()
    group: str | None = None
    covariates: tuple[str, ...] = ()
    categorical: tuple[str, ...] = ()
    reference: tuple[tuple[str, object], ...] = ()
    strata: str | None = None
    entry: str | None = None
    id: str | None = None
    # Dates before 1900 (1900-01-01 included) or after today: "warn" keeps the rows and says
    # how many, "exclude" leaves them out under the reason "implausible date".
    implausible_dates: str = "warn"

    @property
    def cause_names(self) -> tuple[str, ...]:
        """The named causes in the order given: the order of every listing of causes (the first
        is the event of interest unless event_values say otherwise)."""
        return tuple(dict.fromkeys(str(name) for _, name in self.event_causes))

    def cause_order(self, present) -> list[str]:
        """The causes among ``present`` in the order given; "event" (event values mapped to no
        cause: the event of interest) first."""
        present = {str(c) for c in present}
        named = [c for c in self.cause_names if c in present]
        return sorted(present - set(named)) + named

    @property
    def duration_unit(self) -> str:
        """Unit of the duration column (dates are differenced in days)."""
        if self.time is None:
            return "days"
        return self.source_unit or self.unit

    def reference_for(self, column: str):
        for name, level in self.reference:
            if name == column:
                return level
        return None

    def to_dict(self) -> dict:
        out = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, tuple):
                value = [list(v) if isinstance(v, tuple) else v for v in value]
            out[f.name] = value
        return out

    @classmethod
    def from_dict(cls, data: dict) -> Roles:
        if "dayfirst" in data and "day_first" not in data:  # the name before schema 2
            data = {**data, "day_first": data["dayfirst"]}
        kwargs = {}
        for f in fields(cls):
            if f.name not in data:
                continue
            value = data[f.name]
            if f.name in ("event_causes", "reference"):
                value = tuple(tuple(pair) for pair in value or ())
            elif f.name in ("event_values", "covariates", "categorical"):
                value = tuple(value or ())
            kwargs[f.name] = value
        return cls(**kwargs)


@dataclass(frozen=True)
class EventCoding:
    """What the event column holds and how its values map to event (1) / censored (0)."""

    column: str
    counts: tuple[tuple[object, int], ...]  # every distinct value (None = missing) and its count
    event_values: tuple = ()
    censored_values: tuple = ()
    unknown_values: tuple = ()
    assumption: str | None = None
    needs_choice: bool = False

    def describe(self) -> str:
        if self.needs_choice:
            return (
                f"Column {self.column!r}: the event coding is not recognised; name the value(s) "
                "that mean the event."
            )
        text = (
            f"Column {self.column!r}: event = {_join(self.event_values)}; "
            f"censored = {_join(self.censored_values)}"
        )
        if self.unknown_values:
            text += f"; not recognised (rows excluded) = {_join(self.unknown_values)}"
        if self.assumption:
            text += f". {self.assumption}"
        return text

    def to_frame(self) -> pd.DataFrame:
        events = {value_key(v) for v in self.event_values}
        censored = {value_key(v) for v in self.censored_values}
        rows = []
        for value, count in self.counts:
            key = value_key(value)
            meaning = (
                "missing"
                if key is None
                else "event"
                if key in events
                else "censored"
                if key in censored
                else "unknown"
            )
            rows.append({"value": value, "rows": count, "meaning": meaning})
        return pd.DataFrame(rows, columns=["value", "rows", "meaning"])

    def to_dict(self) -> dict:
        return {
            "column": self.column,
            "counts": [[_plain(v), int(c)] for v, c in self.counts],
            "event_values": [_plain(v) for v in self.event_values],
            "censored_values": [_plain(v) for v in self.censored_values],
            "unknown_values": [_plain(v) for v in self.unknown_values],
            "assumption": self.assumption,
            "needs_choice": self.needs_choice,
        }


def describe_event(series: pd.Series, event_values=()) -> EventCoding:
    """Count every value of the event column and map it to event / censored.

    With ``event_values`` the caller decides: those values are events, every other non-missing
    value is censored. Without, common codings are recognised (0/1, true/false, yes/no, words such
    as dead/alive); 1/2 is read as 1 = censored, 2 = event only as a stated assumption.
    """
    return describe_event_counts(
        str(series.name), series.value_counts(dropna=False, sort=True), event_values
    )


def describe_event_counts(column: str, counts_series: pd.Series, event_values=()) -> EventCoding:
    """`describe_event` from the column's value counts (value -> rows, most frequent first), as
    a database returns them without sending the rows."""
    counts = tuple(
        (None if _is_missing(v) else _plain(v), int(c)) for v, c in counts_series.items()
    )
    present = [(v, c) for v, c in counts if v is not None]
    if event_values:
        wanted = {value_key(v) for v in event_values}
        events = tuple(v for v, _ in present if value_key(v) in wanted)
        censored = tuple(v for v, _ in present if value_key(v) not in wanted)
        return EventCoding(column, counts, events, censored)
    keys = {v: value_key(v) for v, _ in present}
    events = tuple(v for v, _ in present if keys[v] in EVENT_WORDS)
    censored = tuple(v for v, _ in present if keys[v] in CENSORED_WORDS)
    unknown = [(v, c) for v, c in present if keys[v] not in EVENT_WORDS | CENSORED_WORDS]
    total = sum(c for _, c in present)
    unknown_rows = sum(c for _, c in unknown)
    numeric_unknown = any(_is_number_key(keys[v]) for v, _ in unknown)
    if set(keys.values()) <= {"1", "2"} and "2" in keys.values():
        one = tuple(v for v, _ in present if keys[v] == "1")
        two = tuple(v for v, _ in present if keys[v] == "2")
        return EventCoding(column, counts, two, one, assumption=ONE_TWO_ASSUMPTION)
    if not unknown or (events and censored and not numeric_unknown and unknown_rows <= 0.1 * total):
        return EventCoding(column, counts, events, censored, tuple(v for v, _ in unknown))
    return EventCoding(column, counts, needs_choice=True)


# --- suggestions and covariate classes ----------------------------------------------------------


@dataclass(frozen=True)
class Suggestion:
    column: str
    reason: str


@dataclass(frozen=True)
class RoleSuggestions:
    """Proposed roles, each with the reason it was proposed. Never applied by the engine."""

    time: Suggestion | None = None
    start: Suggestion | None = None
    end: Suggestion | None = None
    unit: str | None = None
    day_first: bool | None = None
    event: Suggestion | None = None
    group: Suggestion | None = None
    id: Suggestion | None = None
    covariates: tuple[Suggestion, ...] = ()
    notes: tuple[str, ...] = field(default_factory=tuple)

    def to_roles(self, **overrides) -> Roles:
        """Turn the proposals into ``Roles`` once the caller accepts them (overrides win)."""
        base = {
            "time": self.time.column if self.time else None,
            "start": self.start.column if self.start and not self.time else None,
            "end": self.end.column if self.end and not self.time else None,
            "day_first": bool(self.day_first),
            "event": self.event.column if self.event else None,
            "group": self.group.column if self.group else None,
            "id": self.id.column if self.id else None,
            "covariates": tuple(s.column for s in self.covariates),
        }
        if self.unit:
            base["unit"] = self.unit
        base.update(overrides)
        return Roles(**base)

    def to_dict(self) -> dict:
        def one(s):
            return None if s is None else {"column": s.column, "reason": s.reason}

        return {
            "time": one(self.time),
            "start": one(self.start),
            "end": one(self.end),
            "unit": self.unit,
            "day_first": self.day_first,
            "event": one(self.event),
            "group": one(self.group),
            "id": one(self.id),
            "covariates": [one(s) for s in self.covariates],
            "notes": list(self.notes),
        }


SUGGESTION_CELLS = 2_000_000  # cells sampled for suggestions: fewer rows when a file is wide


def suggest_roles(frame: pd.DataFrame, sample_rows: int = 5000) -> RoleSuggestions:
    """Propose roles from column names and contents (a sample of rows is enough).

    Each column's facts are computed once and only when a rule asks for them, and a wide file is
    sampled on fewer rows, so the cost grows with the size of the file, not faster."""
    rows = min(sample_rows, max(200, SUGGESTION_CELLS // max(frame.shape[1], 1)))
    sample = frame.head(rows)
    profiles = [ColumnProfile(c, sample.iloc[:, i]) for i, c in enumerate(sample.columns)]
    used: set[str] = set()
    notes: list[str] = []

    def first(test) -> ColumnProfile | None:
        return next((p for p in profiles if p.name not in used and test(p)), None)

    event = first(lambda p: _EVENT_NAMES.search(p.name) and _event_like(p))
    event = event or first(lambda p: _EVENT_NAMES.search(p.name) and 0 < p.distinct <= 6)
    event = event or first(lambda p: p.distinct == 2 and _event_like(p))
    event_s = None
    if event:
        coding = describe_event(event.series)
        how = "its values look like an event coding" if not coding.needs_choice else "its name"
        event_s = Suggestion(event.name, f"{how} ({_join([v for v, _ in coding.counts][:4])})")
        used.add(event.name)

    time = first(lambda p: _TIME_NAMES.search(p.name) and p.duration_like)
    time_s = start_s = end_s = None
    unit = day_first = None
    if time:
        used.add(time.name)
        time_s = Suggestion(time.name, "a name like a duration and non-negative numbers")
        unit = next((u for u, pat in _UNIT_NAMES.items() if re.search(pat, time.name, re.I)), None)
    else:
        dates = [p.name for p in profiles if p.name not in used and p.dates]
        start = next((c for c in dates if _START_NAMES.search(c)), None)
        end = next((c for c in dates if c != start and _END_NAMES.search(c)), None)
        if start is None and end is None and len(dates) == 2:
            start, end = dates
        if start and end:
            used.update((start, end))
            start_s = Suggestion(start, "holds dates and its name suggests a start")
            end_s = Suggestion(end, "holds dates and its name suggests an end")
            day_first = guess_day_first(sample[start]) or guess_day_first(sample[end])
            if day_first:
                notes.append("Dates have a first part above 12, so they are read day first.")

    id_col = first(lambda p: _ID_NAMES.search(p.name) and p.distinct >= 0.9 * len(sample) > 0)
    id_s = None
    if id_col:
        id_s = Suggestion(id_col.name, "a name like an identifier and (nearly) one value per row")
        used.add(id_col.name)

    group = first(lambda p: _GROUP_NAMES.search(p.name) and 2 <= p.distinct <= 12) or first(
        lambda p: p.text and 2 <= p.distinct <= 6
    )
    group_s = None
    if group:
        group_s = Suggestion(group.name, "few distinct values and a name like a group")
        used.add(group.name)

    covariates = [
        Suggestion(p.name, p.kind)
        for p in profiles
        if p.name not in used
        and p.present
        and not p.dates
        and (p.numeric or (p.text and 0 < p.distinct <= 20) or (p.text and p.kind == "numeric"))
    ]
    return RoleSuggestions(
        time=time_s,
        start=start_s,
        end=end_s,
        unit=unit,
        day_first=day_first,
        event=event_s,
        group=group_s,
        id=id_s,
        covariates=tuple(covariates),
        notes=tuple(notes),
    )


def classify_covariates(frame: pd.DataFrame, roles: Roles) -> dict[str, str]:
    """Kind of each covariate as it will be modelled, with caller's categorical choices applied."""
    out = {}
    for column in roles.covariates:
        kind = covariate_kind(frame[column])
        out[column] = "categorical" if column in roles.categorical else kind
    return out


# Common words for an event, as a value or a column name, and the noun a sentence uses.
_EVENT_NOUNS = {
    "died": "death", "dead": "death", "death": "death", "deceased": "death",
    "relapse": "relapse", "relapsed": "relapse", "recurrence": "recurrence",
    "recurred": "recurrence", "failed": "failure", "failure": "failure", "fail": "failure",
    "progression": "progression", "progressed": "progression", "sold": "sale", "sale": "sale",
    "culled": "culling", "readmitted": "readmission", "readmission": "readmission",
    "infection": "infection", "infected": "infection", "dropout": "dropout",
    "churned": "churn", "churn": "churn", "discharged": "discharge",
}  # fmt: skip
NO_EVENT_NAME = "the event"


def event_in_words(roles: Roles) -> str:
    """The event as a noun for titles and sentences: the name the user typed, else a known
    word among the event's values ("relapsed" -> "relapse") or in the event column's name
    ("failed" -> "failure"), else "the event"."""
    if roles.event_name and str(roles.event_name).strip():
        return " ".join(str(roles.event_name).split())
    candidates = [str(v) for v in roles.event_values] + ([str(roles.event)] if roles.event else [])
    for text in candidates:
        for word in re.findall(r"[a-z]+", text.casefold()):
            if word in _EVENT_NOUNS:
                return _EVENT_NOUNS[word]
    return NO_EVENT_NAME


# --- helpers ------------------------------------------------------------------------------------


def _event_like(profile: ColumnProfile) -> bool:
    return 0 < profile.distinct <= 6 and not describe_event(profile.series).needs_choice


def _is_missing(value) -> bool:
    return value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value))


def _is_number_key(key: str | None) -> bool:
    try:
        float(key)
    except (TypeError, ValueError):
        return False
    return True


def _plain(value):
    """numpy scalars to Python ones for JSON."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, pd.Timestamp):
        return value.isoformat()
    return value


def _join(values) -> str:
    values = list(values)
    return ", ".join(repr(v) for v in values) if values else "none"
