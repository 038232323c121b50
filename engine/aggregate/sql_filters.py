"""Row filters (``engine.prepare.filters``) inside a database: each filter's keep condition as
SQL with ``RowFilter.keep_mask``'s rules, the rows each removes counted in order, and the kept
rows as the relation the data checks read.

As in memory every rule drops rows whose value is missing (NULL, or NaN in a number column),
``in``/``not_in`` compare a number column as numbers (1 matches 1.0) and any other column as
its text, and the limits of ``between``/``at_least``/``at_most`` are finite numbers. A
number rule on a text column, and ``in``/``not_in`` on a date or true/false column, would
need pandas' own parsing of each value; they are refused with a ``FilterError`` naming the
column, rather than run with rules of their own.
"""

from __future__ import annotations

from dataclasses import replace

import pandas as pd

from engine.aggregate.sources import SqlSource
from engine.aggregate.sql import literal, number, quoted
from engine.errors import preview_values
from engine.prepare.filters import FilterError, FilterOutcome, RowFilter, _numbers


def keep_conditions(filters, sample: pd.DataFrame, source: SqlSource) -> list[str]:
    """Per filter, the SQL condition true for the rows it keeps (never NULL)."""
    return [_keep(f, sample, source) for f in filters]


def _keep(row_filter: RowFilter, sample: pd.DataFrame, source: SqlSource) -> str:
    row_filter._check_shape()
    column = row_filter.column
    if column not in sample.columns:
        raise FilterError(
            f"Filter on column '{column}': there is no such column. Columns in the data: "
            f"{preview_values(list(sample.columns), limit=10)}."
        )
    kind = sample[column].dtype
    d = source.dialect
    col = quoted(column)
    is_number = pd.api.types.is_numeric_dtype(kind) and not pd.api.types.is_bool_dtype(kind)
    known = f"{col} IS NOT NULL"
    if pd.api.types.is_float_dtype(kind):
        known = f"({known} AND NOT {d.is_nan(col)})"
    rule = row_filter.rule
    if rule == "not_missing":
        return f"({known})"
    if rule in ("in", "not_in"):
        if is_number:
            wanted = pd.to_numeric(pd.Series(list(row_filter.values), dtype=object), "coerce")
            listed = [number(float(v)) for v in wanted.dropna()]
            value = f"CAST({col} AS {d.double})"
        elif pd.api.types.is_string_dtype(kind):
            listed = [literal(str(v)) for v in row_filter.values]
            value = d.text(col)
        else:
            raise _refused(column, f"rule '{rule}' on a column of {kind} values")
        member = f"{value} IN ({', '.join(listed)})" if listed else "FALSE"
        return f"({known} AND {'NOT ' if rule == 'not_in' else ''}({member}))"
    if not is_number:
        raise _refused(column, f"rule '{rule}' on a column that does not hold numbers")
    bounds = _numbers(column, row_filter.values)
    value = f"CAST({col} AS {d.double})"
    if rule == "between":
        low, high = sorted(bounds)
        test = f"{value} >= {number(low)} AND {value} <= {number(high)}"
    elif rule == "at_least":
        test = f"{value} >= {number(bounds[0])}"
    else:
        test = f"{value} <= {number(bounds[0])}"
    return f"({known} AND {test})"


def _refused(column: str, what: str) -> FilterError:
    return FilterError(
        f"Filter on column '{column}': {what} is not yet available inside a database; use "
        "--backend memory for this filter."
    )


def filter_outcome(source: SqlSource, filters, conditions: list[str]) -> FilterOutcome:
    """Rows each filter removes among those still present when it runs, in one pass."""
    parts = [f"{source.rows()} AS n"]
    for i, condition in enumerate(conditions):
        before = " AND ".join(conditions[:i]) or "TRUE"
        parts.append(f"{source.rows_where(f'{before} AND NOT {condition}')} AS r{i}")
    parts.append(f"{source.rows_where(' AND '.join(conditions))} AS kept")
    row = source.query(f"SELECT {', '.join(parts)} FROM {source.relation}").iloc[0]
    excluded = tuple((f.describe(), int(row[f"r{i}"])) for i, f in enumerate(filters))
    return FilterOutcome(frame=None, excluded=excluded, rows_kept=int(row["kept"]))


def kept_rows(source: SqlSource, conditions: list[str]) -> SqlSource:
    """The source reading only the rows every filter keeps."""
    if not conditions:
        return source
    where = " AND ".join(conditions)
    return replace(source, relation=f"(SELECT * FROM {source.relation} WHERE {where}) AS kept")
