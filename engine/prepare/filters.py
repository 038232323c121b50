"""Row filters: which rows of the imported table an analysis keeps, stated as data.

A filter is part of a recipe, so it is plain JSON (column, rule, values) rather than code, and
every row it removes is counted so the report can say how many rows each filter excluded.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.errors import HazelError, preview_values

RULES = ("in", "not_in", "between", "at_least", "at_most", "not_missing")
# COLUMN:RULE[:VALUES]; the non-greedy column lets a column name hold colons
_FILTER_TEXT = re.compile(
    rf"^(?P<column>.+?):(?P<rule>{'|'.join(RULES)})(?::(?P<values>.*))?$", re.S
)


class FilterError(HazelError):
    """A filter names an unknown column or rule, or its values do not fit the column."""


@dataclass(frozen=True)
class RowFilter:
    """Keep the rows whose ``column`` satisfies ``rule`` with ``values``.

    Rules: ``in`` / ``not_in`` (a list of values), ``between`` (two numbers, inclusive),
    ``at_least`` / ``at_most`` (one number), ``not_missing`` (no values). Every rule drops rows
    whose value is missing, ``not_in`` included: a filter keeps only rows where its column is
    known, so nothing passes a filter by accident.
    """

    column: str
    rule: str
    values: tuple = ()

    def to_dict(self) -> dict:
        return {"column": self.column, "rule": self.rule, "values": list(self.values)}

    @classmethod
    def from_dict(cls, data: dict) -> RowFilter:
        if not isinstance(data, dict) or "column" not in data or "rule" not in data:
            raise FilterError(
                f"A filter must be an object with 'column', 'rule' and 'values'; got {data!r}."
            )
        values = data.get("values", [])
        if not isinstance(values, list):
            values = [values]
        row_filter = cls(column=str(data["column"]), rule=str(data["rule"]), values=tuple(values))
        row_filter._check_shape()
        return row_filter

    @classmethod
    def from_text(cls, text: str) -> RowFilter:
        """A filter written as ``COLUMN:RULE[:V1,V2,...]`` (the command line's ``--filter``):
        ``age:between:18,80``, ``site:in:north,south``, ``stage:not_missing``. The column is
        everything before the last ``:RULE`` (so a column name may hold colons); values are
        separated by commas and kept as text (``in`` compares a numeric column as numbers)."""
        found = _FILTER_TEXT.match(text.strip())
        if not found:
            raise FilterError(
                f"A filter is written COLUMN:RULE[:VALUES] with RULE one of {', '.join(RULES)} "
                f"(for example age:between:18,80 or site:in:north,south); got {text!r}."
            )
        values = found["values"]
        parts = [] if values is None or not values.strip() else values.split(",")
        row_filter = cls(found["column"].strip(), found["rule"], tuple(v.strip() for v in parts))
        row_filter._check_shape()
        if row_filter.rule in ("between", "at_least", "at_most"):  # limits as numbers
            limits = _numbers(row_filter.column, row_filter.values)
            whole = tuple(int(v) if v.is_integer() else v for v in limits)
            row_filter = cls(row_filter.column, row_filter.rule, whole)
        return row_filter

    def describe(self) -> str:
        """Plain words for the report: 'age between 18 and 80'."""
        values = list(self.values)
        if self.rule == "in":
            return f"{self.column} is one of {preview_values(values, limit=10)}"
        if self.rule == "not_in":
            return f"{self.column} is none of {preview_values(values, limit=10)}"
        if self.rule == "between":
            return f"{self.column} between {values[0]} and {values[1]}"
        if self.rule == "at_least":
            return f"{self.column} at least {values[0]}"
        if self.rule == "at_most":
            return f"{self.column} at most {values[0]}"
        return f"{self.column} not missing"

    def _check_shape(self) -> None:
        expected = {"between": 2, "at_least": 1, "at_most": 1, "not_missing": 0}
        if self.rule not in RULES:
            raise FilterError(
                f"Filter on column '{self.column}': unknown rule '{self.rule}'. "
                f"Use one of {', '.join(RULES)}."
            )
        if self.rule in expected and len(self.values) != expected[self.rule]:
            raise FilterError(
                f"Filter on column '{self.column}': rule '{self.rule}' takes "
                f"{expected[self.rule]} value(s), got {len(self.values)}: "
                f"{preview_values(self.values)}."
            )
        if self.rule in ("in", "not_in") and not self.values:
            raise FilterError(
                f"Filter on column '{self.column}': rule '{self.rule}' needs at least one value."
            )

    def keep_mask(self, frame: pd.DataFrame) -> np.ndarray:
        """True for the rows this filter keeps."""
        self._check_shape()
        if self.column not in frame.columns:
            raise FilterError(
                f"Filter on column '{self.column}': there is no such column. Columns in the data: "
                f"{preview_values(list(frame.columns), limit=10)}."
            )
        series = frame[self.column]
        known = series.notna().to_numpy()
        if self.rule == "not_missing":
            return known
        if self.rule in ("in", "not_in"):
            member = _membership(series, self.values)
            return known & (member if self.rule == "in" else ~member)
        numbers = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float)
        bounds = _numbers(self.column, self.values)
        with np.errstate(invalid="ignore"):
            if self.rule == "between":
                low, high = sorted(bounds)
                return (numbers >= low) & (numbers <= high)
            if self.rule == "at_least":
                return numbers >= bounds[0]
            return numbers <= bounds[0]


def _numbers(column: str, values) -> list[float]:
    """The limits as finite numbers (a limit of 'x', NaN or infinity is refused)."""
    try:
        numbers = [float(v) for v in values]
    except (TypeError, ValueError, OverflowError):
        numbers = [math.nan]
    if not all(math.isfinite(v) for v in numbers):
        raise FilterError(
            f"Filter on column '{column}': the limits must be finite numbers; got "
            f"{preview_values(values)}."
        )
    return numbers


def _membership(series: pd.Series, values) -> np.ndarray:
    """Numeric columns compare as numbers (1 matches 1.0); others compare as text."""
    if pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series):
        wanted = pd.to_numeric(pd.Series(list(values), dtype=object), errors="coerce").dropna()
        return series.isin(wanted.astype(float).tolist()).to_numpy()
    text = series.astype("string")
    return text.isin([str(v) for v in values]).fillna(False).to_numpy(dtype=bool)


@dataclass(frozen=True)
class FilterOutcome:
    """The kept rows (None where they stay in a database) and, per filter in order, how many
    rows it removed."""

    frame: pd.DataFrame | None
    excluded: tuple[tuple[str, int], ...]
    rows_kept: int

    def refuse_if_empty(self) -> FilterOutcome:
        """Itself when some row is kept; filters that keep no row are refused (a FilterError
        with each filter's count), so no analysis or page sees an empty table."""
        if self.rows_kept or not self.excluded:
            return self
        steps = "; ".join(f"{text}: {rows:,} removed" for text, rows in self.excluded)
        raise FilterError(
            f"These filters would remove every row ({steps}), so they were not applied. "
            "Widen the last filter or remove one."
        )

    def to_dict(self) -> dict:
        return {
            "rows_kept": self.rows_kept,
            "excluded": [{"filter": text, "rows": rows} for text, rows in self.excluded],
        }


def apply_filters(frame: pd.DataFrame, filters) -> FilterOutcome:
    """Apply the filters in order; each counts only rows still present when it runs."""
    keep = np.ones(len(frame), dtype=bool)
    excluded = []
    for row_filter in filters:
        mask = row_filter.keep_mask(frame)
        removed = int(np.count_nonzero(keep & ~mask))
        excluded.append((row_filter.describe(), removed))
        keep &= mask
    kept = frame if keep.all() else frame.loc[keep].reset_index(drop=True)
    return FilterOutcome(frame=kept, excluded=tuple(excluded), rows_kept=len(kept))
