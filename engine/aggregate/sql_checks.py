"""The data checks of ``engine.prepare.checks.prepare`` run inside a database, with the same rules,
reasons and texts: rows read, used and excluded per reason (the first reason a row meets),
the event coding from the event column's value counts, levels in natural order with the most
frequent as reference, and the warnings on the rows used. Named causes are
mapped as ``checks._event_codes`` maps them (``_cause``); start and end dates are turned into
durations by ``sql_dates``. An id column's episodes are summarised per id (``_episode_notes``),
and the checked rows keep the id (``_id``) for the Cox model's choice of variance.

Nothing but small tables comes back: value counts of the coded columns, a few totals, and the
counts per (reason, group, stratum, time, event, cause) and per (group, stratum, entry time).
The SQL of the checked rows (``AggregatedData.clean``) is what the Cox sums then read.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.aggregate.counts import CountTable, count_table
from engine.aggregate.sources import SqlSource
from engine.aggregate.sql import counted, literal, number, quoted
from engine.aggregate.sql_dates import dates_in_sql
from engine.aggregate.sql_filters import filter_outcome, keep_conditions, kept_rows
from engine.errors import RoleError, preview_values
from engine.prepare.checks import (
    ENTRY_AFTER_EXIT,
    MISSING_COVARIATE,
    MISSING_ENTRY,
    MISSING_EVENT,
    MISSING_TIME,
    NEGATIVE_TIME,
    NON_NUMERIC_TIME,
    REASONS,
    TIME_NOT_FINITE,
    UNKNOWN_EVENT,
    DataReport,
    _validate_roles,
    event_coding,
    not_numbers_note,
)
from engine.prepare.data_warnings import labels_warning, warnings_from_summary
from engine.prepare.filters import FilterOutcome
from engine.prepare.roles import (
    TIME_UNITS,
    Roles,
    classify_covariates,
    natural_sort_key,
    seconds_in_unit,
    value_key,
)


@dataclass(frozen=True)
class Levels:
    """A coded column's levels in category order: the SQL text of each and its value."""

    keys: tuple[str, ...]
    labels: tuple

    def code_of(self) -> dict:
        return {k: i for i, k in enumerate(self.keys)}


@dataclass(frozen=True)
class AggregatedData:
    """What ``prepare`` gives, without the rows: the report, the counts, the levels, and the
    SQL of the checked rows (columns ``_reason``, ``_time``, ``_event``, ``_group``,
    ``_strata``, ``_entry``, ``_cause`` and ``c0``, ``c1``, ... for the covariates, and ``_n``:
    how many identical rows each is, see ``checked_cells``)."""

    source: SqlSource
    roles: Roles
    report: DataReport
    counts: CountTable
    clean: str
    levels: dict  # "_group", "_strata" and categorical covariates -> Levels
    covariate_columns: dict  # covariate -> its column in ``clean``
    kinds: dict
    filtered: FilterOutcome | None = None  # what the row filters removed, before the checks

    @property
    def has_entry(self) -> bool:
        return self.roles.entry is not None


def checked_cells(source: SqlSource, clean: str, columns: list[str]) -> str:
    """The checked rows merged, in one pass over the data, into cells of identical checked
    values (reason, time, event, group, strata, entry, cause, covariates) with their count
    ``_n``, kept as a temporary table where the backend can keep one (DuckDB, Spark).

    Everything after the checks (the counts per reason, group, stratum and time; the Cox
    model's design and Newton steps) reads the cells, weighting each by ``_n``: exact, since a
    cell of n identical rows adds n times the same terms, and a registry's rows repeat a few
    thousand days and a few covariate values. A read-only PostgreSQL session cannot keep a
    table: there each query reads the checked rows, each a cell of one.
    """
    listed = ", ".join(columns)
    if source.weight is None:
        cells = f"SELECT {listed}, COUNT(*) AS _n FROM ({clean}) AS checked GROUP BY {listed}"
    else:  # the rows are merged already (``SqlSource.grouped``): each cell checked once
        cells = f"SELECT {listed}, {source.weight} AS _n FROM ({clean}) AS checked"
    kept = source.materialize(cells, _table_name("hazel_checked_cells"))
    if kept:
        return f"SELECT * FROM {kept}"
    return f"SELECT *, {source.weight or 1} AS _n FROM ({clean}) AS checked"


def _table_name(stem: str) -> str:
    """A new temporary table's name: one per check, since a session may hold more."""
    import uuid

    return f"{stem}_{uuid.uuid4().hex[:12]}"


def _role_columns(roles: Roles) -> list[str]:
    """The columns the checks read."""
    named = (roles.time, roles.start, roles.end, roles.event, roles.group, roles.strata)
    return [c for c in (*named, roles.entry, roles.id, *roles.covariates) if c]


def _factor(from_unit: str, to_unit: str) -> float | None:
    return None if from_unit == to_unit else TIME_UNITS[from_unit] / TIME_UNITS[to_unit]


def _scaled(expr: str, factor: float | None, d) -> str:
    """``expr`` times ``factor``, infinite where the product is beyond the double range (as in
    numpy; PostgreSQL would fail on the overflow)."""
    if factor is None:
        return expr
    with np.errstate(over="ignore"):  # a factor below 1 cannot overflow: infinite, unguarded
        largest = np.finfo(float).max / factor
    if largest >= np.finfo(float).max:
        return f"({expr} * {number(factor)})"
    infinity = f"CAST('inf' AS {d.double})"
    return (
        f"(CASE WHEN ABS({expr}) > {number(largest)} THEN SIGN({expr}) * {infinity} "
        f"ELSE {expr} * {number(factor)} END)"
    )


class _Columns:
    """SQL expressions for one source, decided from the sample's column types."""

    def __init__(self, source: SqlSource, sample: pd.DataFrame):
        self.source, self.sample, self.d = source, sample, source.dialect

    def raw(self, column: str) -> str:
        return quoted(column)

    def numeric(self, column: str, role: str, unit: str | None = None) -> tuple[str, str, bool]:
        """(number expression, missing condition, is_text) as ``checks._numbers`` reads it (a
        duration column of a time role: its span in ``unit``)."""
        series = self.sample[column]
        col = quoted(column)
        if unit is not None and pd.api.types.is_timedelta64_dtype(series):
            second = number(seconds_in_unit(1.0, unit))  # one second in the unit
            return f"({self.d.seconds(col)} * {second})", f"({col} IS NULL)", False
        if pd.api.types.is_bool_dtype(series):
            raise RoleError(
                f"The {role} column {column!r} holds true/false values, not numbers.",
                column=column,
            )
        if pd.api.types.is_datetime64_any_dtype(series):
            raise RoleError(
                f"The {role} column {column!r} holds dates ({preview_values(series.head(3))}). "
                "Use start and end date columns instead of a duration column.",
                column=column,
            )
        if pd.api.types.is_numeric_dtype(series):
            value = f"CAST({col} AS {self.d.double})"
            nan = self.d.is_nan(value)
            return (
                f"(CASE WHEN {nan} THEN NULL ELSE {value} END)",
                f"({col} IS NULL OR {nan})",
                False,
            )
        return self.d.to_number(col), f"({col} IS NULL)", True


def _case(conditions: list[tuple[str, str]]) -> str:
    if not conditions:
        return "CAST(NULL AS INTEGER)"
    whens = " ".join(f"WHEN {c} THEN {REASONS.index(r)}" for c, r in conditions)
    return f"(CASE {whens} END)"


def _in(expr: str, keys) -> str:
    keys = list(keys)
    return f"{expr} IN ({', '.join(literal(k) for k in keys)})" if keys else "FALSE"


def aggregate_checks(
    source: SqlSource, roles: Roles, *, require_covariates: bool = False, filters=()
) -> AggregatedData:
    """Run the checks in the database on the rows the row ``filters`` keep (applied first, in
    order, as ``apply_filters`` does before ``prepare``); raise the same errors as ``prepare``
    for bad roles."""
    sample = source.sample()
    _validate_roles(sample, roles)
    keep = keep_conditions(filters, sample, source)
    rows = kept_rows(source, keep)  # in the rows' order, for the first dates read
    columns = _role_columns(roles) + [f.column for f in filters]
    source = source.grouped(columns, _table_name("hazel_row_cells"))
    filtered = filter_outcome(source, filters, keep) if filters else None
    source = kept_rows(source, keep)
    cols = _Columns(source, sample)
    d = source.dialect
    notes: list[str] = []
    conditions: list[tuple[str, str]] = []
    totals: dict[str, str] = {}  # name -> SQL aggregate over all rows read

    # time
    if roles.time:
        value, missing, is_text = cols.numeric(roles.time, "time", roles.duration_unit)
        conditions.append((missing, MISSING_TIME))
        if is_text:
            conditions.append((f"{value} IS NULL", NON_NUMERIC_TIME))
            totals["time_numbers"] = source.count(value)
            totals["time_present"] = source.count(quoted(roles.time))
        time = _scaled(value, _factor(roles.duration_unit, roles.unit), d)
        # infinite in the unit of the analysis (1e308 years is beyond the double range in days)
        conditions.append((_infinite(time, d), TIME_NOT_FINITE))
        conditions.append((f"{value} < 0", NEGATIVE_TIME))
    relation = source.relation
    if not roles.time:
        dates = dates_in_sql(source, sample, roles, notes, rows=rows)
        relation, time = dates.relation, dates.time
        conditions.extend(dates.conditions)

    # event: coded from its value counts; named causes as ``checks._event_codes`` maps them
    coding = None
    cause = None
    if roles.event is None:
        notes.append("No event column: every row is treated as an event (no censoring).")
        event = "1"
    else:
        col = quoted(roles.event)
        values = source.query(
            f"SELECT {d.text(col)} AS k, {d.smallest(col, _is_boolean(sample, roles.event))} "
            f"AS v, {source.rows()} AS n "
            f"FROM {source.relation} "
            "GROUP BY 1"
        )
        values = values.sort_values("n", ascending=False, kind="stable")
        present = values[values["k"].notna()]
        counts = pd.Series(
            values["n"].to_numpy(),
            index=pd.Index(
                [None if pd.isna(k) else v for k, v in zip(values["k"], values["v"], strict=True)],
                dtype=object,
            ),
        )
        coding = event_coding(roles, counts, notes, column=roles.event)
        events = {value_key(v) for v in coding.event_values}
        censored = {value_key(v) for v in coding.censored_values}
        event_keys = [
            k for k, v in zip(present["k"], present["v"], strict=True) if value_key(v) in events
        ]
        censored_keys = [
            k for k, v in zip(present["k"], present["v"], strict=True) if value_key(v) in censored
        ]
        text = d.text(col)
        kind = sample[roles.event].dtype
        if pd.api.types.is_numeric_dtype(kind) and not pd.api.types.is_bool_dtype(kind):
            # a numeric column is compared as numbers, not as its text: the same rows (each
            # key is one number's text, and ``v`` that number), without a cast of every row
            number_of = dict(zip(present["k"], present["v"], strict=True))

            def matches(keys):
                numbers = [number(number_of[k]) for k in keys]
                return f"{col} IN ({', '.join(numbers)})" if numbers else "FALSE"

            is_event, is_censored = matches(event_keys), matches(censored_keys)
        else:
            is_event, is_censored = _in(text, event_keys), _in(text, censored_keys)
        event = (
            f"(CASE WHEN {col} IS NULL THEN -1 WHEN {is_event} THEN 1 "
            f"WHEN {is_censored} THEN 0 ELSE -2 END)"
        )
        if pd.api.types.is_float_dtype(sample[roles.event]):
            event = f"(CASE WHEN {d.is_nan(col)} THEN -1 ELSE {event} END)"
        if roles.event_causes:
            cause = _cause_sql(roles, present, text, event)
    conditions.append((f"{event} = -1", MISSING_EVENT))
    conditions.append((f"{event} = -2", UNKNOWN_EVENT))

    # entry
    entry = None
    if roles.entry:
        value, _missing, _ = cols.numeric(roles.entry, "entry time", roles.duration_unit)
        entry = _scaled(value, _factor(roles.duration_unit, roles.unit), d)
        conditions.append((f"{entry} IS NULL", MISSING_ENTRY))
        conditions.append((_infinite(entry, d), TIME_NOT_FINITE))
        conditions.append((f"{entry} >= {time}", ENTRY_AFTER_EXIT))

    # covariates
    kinds = classify_covariates(sample, roles)
    levels: dict[str, Levels] = {}
    coded = {}  # column -> SQL text key, for group, strata and categorical covariates
    covariate_sql = {}
    bad_cells: list[tuple[str, str]] = []  # numeric covariates: (column, SQL of a bad cell)
    for role, column in (("_group", roles.group), ("_strata", roles.strata)):
        if column:
            coded[role] = column
    for column in roles.covariates:
        if kinds[column] != "categorical" and roles.reference_for(column) is not None:
            raise RoleError(
                f"A reference level is given for {column!r}, which is treated as numeric; "
                "add it to the categorical covariates or drop the reference.",
                column=column,
            )
        if kinds[column] == "possibly categorical":  # the first rows say so; all rows decide
            kinds[column] = _full_kind(source, column, roles)
        numeric = kinds[column] == "numeric" or (
            kinds[column] == "possibly categorical" and column not in roles.categorical
        )
        if numeric:
            value, missing, is_text = cols.numeric(column, "covariate")
            # a cell that is no finite number is missing, named in a note (``_covariate``)
            no_number = f"({value} IS NULL OR {_infinite(value, d)})"
            bad = f"({quoted(column)} IS NOT NULL AND NOT {missing} AND {no_number})"
            bad_cells.append((column, bad))
            value = f"(CASE WHEN {_infinite(value, d)} THEN NULL ELSE {value} END)"
            covariate_sql[column] = value
            totals[f"missing::{column}"] = source.rows_where(f"{value} IS NULL")
            if is_text:
                totals[f"numbers::{column}"] = source.count(value)
                totals[f"present::{column}"] = source.count(quoted(column))
        else:
            coded[column] = column
            covariate_sql[column] = d.text(quoted(column))
            totals[f"missing::{column}"] = source.rows_where(f"{quoted(column)} IS NULL")
        if require_covariates:
            conditions.append((f"{covariate_sql[column]} IS NULL", MISSING_COVARIATE))

    if coded:
        levels = _levels(source, coded, roles, sample)
    stats = _totals(source, totals)
    _check_numbers(sample, stats, roles)

    reason = _case(conditions)
    select = [f"{reason} AS _reason", f"{time} AS _time", f"{event} AS _event"]
    for role in ("_group", "_strata"):
        if role in coded:
            select.append(f"{d.text(quoted(coded[role]))} AS {role}")
    if entry is not None:
        select.append(f"{entry} AS _entry")
    if cause is not None:
        select.append(f"{cause} AS _cause")
    if roles.id:
        col = quoted(roles.id)
        known = f"{col} IS NOT NULL"
        if pd.api.types.is_float_dtype(sample[roles.id]):
            known = f"({known} AND NOT {d.is_nan(col)})"
        select.append(f"(CASE WHEN {known} THEN {col} END) AS _id")
        select.append(f"(CASE WHEN {known} THEN 1 END) AS _has_id")  # the model's complete cases
    covariate_columns = {}
    for i, column in enumerate(roles.covariates):
        covariate_columns[column] = f"c{i}"
        select.append(f"{covariate_sql[column]} AS c{i}")
    clean = f"SELECT {', '.join(select)}{_weight_column(source)} FROM {relation}"
    clean = checked_cells(source, clean, [item.rsplit(" AS ", 1)[1] for item in select])

    counts, excluded, rows_read = _counts(
        source, clean, levels, entry is not None, roles if cause is not None else None
    )
    for column, bad in bad_cells:
        found = source.query(
            f"SELECT {quoted(column)} AS v, {source.rows()} AS n FROM {source.relation} "
            f"WHERE {bad} GROUP BY 1"
        )
        if len(found):
            pairs = zip(map(_plain, found["v"]), found["n"], strict=True)
            notes.append(not_numbers_note(column, list(pairs)))
    for column in roles.covariates:
        missing = counted(stats.get(f"missing::{column}", 0))
        if not require_covariates and missing:
            notes.append(
                f"Covariate {column!r} is missing in {missing} row(s); a model leaves "
                "those rows out."
            )
        if kinds[column] == "possibly categorical" and column not in roles.categorical:
            notes.append(
                f"Covariate {column!r} is numeric with few distinct values; if it is a coded "
                "category, mark it categorical."
            )
    by_group = _group_counts(counts)
    labels = [*_prepared_columns(roles), *(v for lv in levels.values() for v in lv.labels)]
    labels += list(counts.causes or ())
    id_notes = _episode_notes(source, clean, roles, entry is not None, sample)
    notes.extend(_warnings(source, counts, by_group, roles, labels_warning(labels), id_notes))
    events = counts.events
    competing = counts.competing
    report = DataReport(
        rows_read=rows_read,
        rows_used=counts.rows,
        events=events,
        censored=counts.rows - events - competing,
        competing_events=competing,
        time_unit=roles.unit,
        excluded=excluded,
        warnings=tuple(notes),
        group_counts=by_group,
        event_coding=coding,
        covariate_kinds=kinds,
    )
    return AggregatedData(
        source, roles, report, counts, clean, levels, covariate_columns, kinds, filtered
    )


def _weight_column(source: SqlSource) -> str:
    """The cells' count column, carried into a subquery that ``source.rows()`` reads."""
    return "" if source.weight is None else f", {source.weight}"


def _cause_sql(roles: Roles, present: pd.DataFrame, text: str, event: str) -> str:
    """The cause name of a row as ``checks._event_codes`` gives it: the name of its event
    value; "event" for an event value without a name; NULL for censored, missing or unknown."""
    names = {value_key(v): name for v, name in roles.event_causes}
    keys: dict[str, list] = {}
    for k, v in zip(present["k"], present["v"], strict=True):
        name = names.get(value_key(v))
        if name is not None:
            keys.setdefault(name, []).append(k)
    whens = " ".join(f"WHEN {_in(text, ks)} THEN {literal(name)}" for name, ks in keys.items())
    return (
        f"(CASE WHEN {event} < 0 THEN NULL {whens} WHEN {event} = 1 THEN {literal('event')} "
        "ELSE NULL END)"
    )


def _infinite(expr: str, d) -> str:
    """True for +-infinity only (NULL and NaN are not): larger than the largest double."""
    return f"(ABS({expr}) > CAST(1.7976931348623157E308 AS {d.double}))"


def _full_kind(source: SqlSource, column: str, roles: Roles) -> str:
    """`covariate_kind` over the whole column: few distinct whole numbers or not."""
    from engine.prepare.roles import FEW_DISTINCT

    col = quoted(column)
    sql = (
        f"SELECT COUNT(*) AS n, SUM(CASE WHEN v = FLOOR(v) THEN 1 ELSE 0 END) AS whole FROM "
        f"(SELECT DISTINCT CAST({col} AS {source.dialect.double}) AS v FROM {source.relation} "
        f"WHERE {col} IS NOT NULL LIMIT {FEW_DISTINCT + 1}) AS distinct_values"
    )
    row = source.query(sql).iloc[0]
    few = counted(row["n"]) <= FEW_DISTINCT and counted(row["whole"]) == counted(row["n"])
    kind = "possibly categorical" if few else "numeric"
    return "categorical" if column in roles.categorical else kind


def _is_boolean(sample: pd.DataFrame, column: str) -> bool:
    return pd.api.types.is_bool_dtype(sample[column])


def _levels(source: SqlSource, coded: dict, roles: Roles, sample: pd.DataFrame) -> dict:
    """Levels of each coded column from one GROUPING SETS pass: natural order, and for a
    covariate its reference first (given, or the most frequent, natural-order tie break)."""
    d = source.dialect
    names = list(dict.fromkeys(coded.values()))
    inner = ", ".join(
        f"{d.text(quoted(c))} AS k{i}, {quoted(c)} AS v{i}" for i, c in enumerate(names)
    )
    keys = ", ".join(f"k{i}" for i in range(len(names)))
    flags = ", ".join(f"GROUPING(k{i}) AS g{i}" for i in range(len(names)))
    mins = ", ".join(
        f"{d.smallest(f'v{i}', _is_boolean(sample, c))} AS v{i}" for i, c in enumerate(names)
    )
    sets = ", ".join(f"(k{i})" for i in range(len(names)))
    sql = (
        f"SELECT {flags}, {keys}, {mins}, {source.rows()} AS n FROM (SELECT {inner}"
        f"{_weight_column(source)} FROM {source.relation}) AS coded GROUP BY GROUPING SETS ({sets})"
    )
    table = source.query(sql)
    by_column = {}
    for i, column in enumerate(names):
        part = table[(table[f"g{i}"] == 0) & table[f"k{i}"].notna()]
        found = list(zip(part[f"k{i}"], part[f"v{i}"], part["n"], strict=True))
        found.sort(key=lambda kvn: natural_sort_key(_plain(kvn[1])))
        if column in roles.covariates and found:
            reference = roles.reference_for(column)
            if reference is None:
                top = max(n for _, _, n in found)
                index = next(i for i, (_, _, n) in enumerate(found) if n == top)
            else:
                matches = [
                    i for i, (_, v, _) in enumerate(found) if value_key(v) == value_key(reference)
                ]
                if not matches:
                    raise RoleError(
                        f"Reference level {reference!r} does not occur in column {column!r}; its "
                        f"levels are {preview_values([_plain(v) for _, v, _ in found], 10)}.",
                        column=column,
                        values=[reference],
                    )
                index = matches[0]
            found.insert(0, found.pop(index))
        by_column[column] = Levels(
            tuple(str(k) for k, _, _ in found), tuple(_plain(v) for _, v, _ in found)
        )
    return {role: by_column[column] for role, column in coded.items()}


def _plain(value):
    if isinstance(value, np.generic):
        return value.item()
    return value


def _totals(source: SqlSource, totals: dict) -> dict:
    if not totals:
        return {}
    names = list(totals)
    sql = ", ".join(f"{expr} AS t{i}" for i, expr in enumerate(totals.values()))
    row = source.query(f"SELECT {sql} FROM {source.relation}").iloc[0]
    return {name: _plain(row[f"t{i}"]) for i, name in enumerate(names)}


def _check_numbers(sample: pd.DataFrame, stats: dict, roles: Roles) -> None:
    """A column with values but not one number (or date) is refused, as in memory."""
    checks = []
    if "time_present" in stats:
        checks.append((roles.time, "time", stats["time_present"], stats["time_numbers"]))
    for column in roles.covariates:
        if f"present::{column}" in stats:
            checks.append(
                (column, "covariate", stats[f"present::{column}"], stats[f"numbers::{column}"])
            )
    for column, role, present, numbers in checks:
        if present and not numbers:
            values = sample[column].dropna().unique()
            raise RoleError(
                f"The {role} column {column!r} holds no numbers (values such as "
                f"{preview_values(values)}). Choose a numeric column, or use "
                "start and end date columns if it holds dates.",
                column=column,
                values=list(values[:5]),
            )


def _codes(keys: pd.Series, levels: Levels | None) -> np.ndarray:
    if levels is None:
        return np.zeros(len(keys), dtype=np.int64)
    lookup = levels.code_of()
    return np.array([lookup.get(k, -1) if isinstance(k, str) else -1 for k in keys], np.int64)


def _counts(source: SqlSource, clean: str, levels: dict, has_entry: bool, cause_roles):
    """Rows per reason, and the exit (per cause, with causes: ``cause_roles`` the roles that
    name them, None without) and entry counts of the rows used (two passes)."""
    has_cause = cause_roles is not None
    group = "_group" if "_group" in levels else "NULL"
    strata = "_strata" if "_strata" in levels else "NULL"
    cause = "_cause" if has_cause else "NULL"
    used = "_reason IS NULL"
    sql = (
        f"SELECT _reason AS reason, CASE WHEN {used} THEN {group} END AS g, "
        f"CASE WHEN {used} THEN {strata} END AS s, CASE WHEN {used} THEN _time END AS t, "
        f"CASE WHEN {used} THEN _event END AS e, CASE WHEN {used} THEN {cause} END AS c, "
        f"SUM(_n) AS n FROM ({clean}) AS checked GROUP BY 1, 2, 3, 4, 5, 6"
    )
    table = source.query(sql)
    rows_read = int(table["n"].sum())
    excluded_table = table[table["reason"].notna()]
    by_reason = excluded_table.groupby("reason")["n"].sum()
    excluded = tuple(
        (REASONS[int(r)], int(by_reason[r])) for r in sorted(by_reason.index.astype(int))
    )
    kept = table[table["reason"].isna()]
    event = kept["e"].to_numpy(dtype=np.int64)
    n = kept["n"].to_numpy(dtype=np.int64)
    exits = pd.DataFrame(
        {
            "group": _codes(kept["g"], levels.get("_group")),
            "stratum": _codes(kept["s"], levels.get("_strata")),
            "time": kept["t"].to_numpy(dtype=float),
            "events": np.where(event == 1, n, 0),
            "censored": np.where(event == 1, 0, n),
        }
    )
    entries = None
    if has_entry:
        e = source.query(
            f"SELECT {group} AS g, {strata} AS s, _entry AS en, SUM(_n) AS n FROM ({clean}) "
            f"AS checked WHERE {used} GROUP BY 1, 2, 3"
        )
        entries = pd.DataFrame(
            {
                "group": _codes(e["g"], levels.get("_group")),
                "stratum": _codes(e["s"], levels.get("_strata")),
                "entry": e["en"].to_numpy(dtype=float),
                "rows": e["n"].to_numpy(dtype=np.int64),
            }
        )
    causes = None
    if has_cause:
        named = kept["c"].notna().to_numpy()
        exits["cause"] = np.where(named, kept["c"].astype(object), None)
        causes = cause_roles.cause_order(kept.loc[named, "c"].unique())
    g = levels.get("_group")
    s = levels.get("_strata")
    counts = count_table(
        exits,
        entries,
        None if g is None else g.labels,
        None if s is None else s.labels,
        causes=causes,
    )
    return counts, excluded, rows_read


def _group_counts(counts: CountTable) -> pd.DataFrame:
    """`data_warnings.group_counts` from the counts (rows, events, competing, censored per
    group)."""
    ex = counts.exits
    if counts.group_labels is None:
        n, events = counts.rows, counts.events
        table = pd.DataFrame(
            {"n": [n], "events": [events], "competing": [counts.competing]}, index=["all"]
        )
    else:
        size = len(counts.group_labels)
        has = ex["group"] >= 0
        codes = ex.loc[has, "group"].to_numpy()
        rows = (ex.loc[has, "events"] + ex.loc[has, "censored"]).to_numpy()
        table = pd.DataFrame(
            {
                "n": np.rint(np.bincount(codes, rows, size)).astype(np.int64),
                "events": np.rint(np.bincount(codes, ex.loc[has, "events"], size)),
                "competing": np.rint(np.bincount(codes, ex.loc[has, "competing"], size)).astype(
                    np.int64
                ),
            },
            index=pd.Index(list(counts.group_labels), dtype=object),
        )
    table["censored"] = table["n"] - table["events"] - table["competing"]
    table = table.rename_axis("group").reset_index()
    return table.astype({c: "int64" for c in ("n", "events", "competing", "censored")})


def _prepared_columns(roles: Roles) -> list[str]:
    """The prepared frame's column names (``checks.prepare``), for the labels warning."""
    names = ["_time", "_event"]
    names += ["_cause"] if roles.event_causes and roles.event else []
    names += [n for n, c in (("_group", roles.group), ("_strata", roles.strata)) if c]
    names += ["_entry"] if roles.entry else []
    names += ["_id"] if roles.id else []
    return [*names, *roles.covariates]


def _warnings(
    source: SqlSource, counts: CountTable, by_group, roles: Roles, hidden, id_notes=()
) -> list[str]:
    ex = counts.exits
    times = ex["time"].to_numpy()
    zeros = int((ex.loc[times == 0, "events"] + ex.loc[times == 0, "censored"]).sum())
    distinct = np.unique(times)
    raw_times = distinct
    no_group = 0
    if roles.group:
        missing = ex["group"] < 0
        no_group = int((ex.loc[missing, "events"] + ex.loc[missing, "censored"]).sum())
    return warnings_from_summary(
        roles,
        zeros=zeros,
        times=raw_times,
        events=counts.events if counts.rows else None,
        counts=by_group,
        no_group=no_group,
        hidden=hidden,
        id_notes=id_notes,
    )


def _episode_notes(source: SqlSource, clean: str, roles: Roles, has_entry: bool, sample):
    """``episode_warnings`` on the rows used, from the checked cells: subjects, episodes, the
    subjects with several rows and those whose episodes overlap (an episode entering before the
    previous one of the subject left, or identical rows), with the smallest such ids."""
    from engine.prepare.episodes import EpisodeSummary, episode_warnings

    if not roles.id:
        return []
    used = f"SELECT * FROM ({clean}) AS checked WHERE _reason IS NULL AND _id IS NOT NULL"
    per_id = (
        f"SELECT _id, SUM(_n) AS n, SUM(CASE WHEN _event = 1 THEN _n ELSE 0 END) AS e "
        f"FROM ({used}) AS u GROUP BY _id"
    )
    row = source.query(
        f"SELECT COUNT(*) AS subjects, SUM(n) AS episodes, "
        f"SUM(CASE WHEN n > 1 THEN 1 ELSE 0 END) AS several, MAX(e) AS most FROM ({per_id}) p"
    ).iloc[0]
    several = counted(row["several"])
    if not several:
        return []
    text = not (
        pd.api.types.is_numeric_dtype(sample[roles.id])
        and not pd.api.types.is_bool_dtype(sample[roles.id])
    )
    order = 'p._id COLLATE "C"' if text and source.backend == "postgresql" else "p._id"
    repeated = source.query(
        f"SELECT p._id AS v FROM ({per_id}) AS p WHERE n > 1 ORDER BY {order} LIMIT 6"
    )["v"]
    overlapping, overlapping_ids = 0, ()
    if has_entry:
        before = "LAG(_time) OVER (PARTITION BY _id ORDER BY _entry, _time)"
        bad = (
            f"SELECT DISTINCT _id FROM (SELECT _id, _n, _entry, {before} AS previous FROM "
            f"({used}) AS u) AS w WHERE _n > 1 OR _entry < previous"
        )
        overlapping = int(source.query(f"SELECT COUNT(*) AS k FROM ({bad}) AS b")["k"].iloc[0])
        if overlapping:
            overlapping_ids = tuple(
                _plain(v)
                for v in source.query(f"SELECT p._id AS v FROM ({bad}) AS p ORDER BY {order} "
                                      "LIMIT 5")["v"]
            )  # fmt: skip
    summary = EpisodeSummary(
        subjects=int(row["subjects"]),
        episodes=int(row["episodes"]),
        subjects_with_several=several,
        most_events=counted(row["most"]),
        overlapping=overlapping,
        overlapping_ids=overlapping_ids,
        repeated_ids=tuple(_plain(v) for v in repeated),
    )
    return episode_warnings(summary, roles.id, has_entry)
