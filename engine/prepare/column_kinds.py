"""What a column's values are: numbers (also inside text), dates, few or many levels; natural order.

Used by the role suggestions (``engine.prepare.roles.suggest_roles``) and the checks. Every
judgement here
looks at a bounded number of cells (the first few hundred present values), so proposing roles for
a file of 5,000 columns costs about as much per column as for a file of five, and a column's kind
is decided the same way by the suggestions and by ``engine.prepare.checks.prepare``.
"""

from __future__ import annotations

import math
import re
from functools import cached_property

import numpy as np
import pandas as pd

FEW_DISTINCT = 5  # a numeric covariate with at most this many values may be a coded category
MAX_LEVELS = 100  # most levels a group or categorical covariate may have (one term per level)
LOOK_AT = 200  # present cells looked at to judge a text column (numbers? dates?)
GLANCE = 20  # the first cells decide when they clearly say no
_ISO_DATE = r"[0-9]{4}-[0-9]{1,2}-[0-9]{1,2}"
_OTHER_DATE = r"[0-9]{1,2}[/.\-][0-9]{1,2}[/.\-][0-9]{2,4}"
_DATE_TEXT = re.compile(rf"^\s*({_ISO_DATE}|{_OTHER_DATE})([ T].*)?$")
# What text is a number, after trimming, a decimal comma read as a point and lower case: decimal
# digits with an optional exponent, or infinity. Not "nan", digit separators ("1_000"), hex or
# words. The in-memory checks and the SQL of every backend (``sql.Dialect.to_number``) both read
# it from here; a number beyond the double range is infinite (a time "not finite"), not text.
NUMBER_TEXT = r"^[+-]?(([0-9]+\.?[0-9]*|\.[0-9]+)(e[+-]?[0-9]+)?|inf|infinity)$"
_NUMBER_TEXT = re.compile(NUMBER_TEXT)


def number_text(cell: str) -> str:
    """A cell's text as ``NUMBER_TEXT`` is matched against: trimmed, decimal comma as point, lower
    case."""
    return str(cell).strip().replace(",", ".").lower()


def is_text(series: pd.Series) -> bool:
    return series.dtype == object or isinstance(series.dtype, pd.CategoricalDtype | pd.StringDtype)


def first_present(series: pd.Series, count: int = LOOK_AT) -> list:
    """Up to ``count`` non-missing cells from the top, without scanning the whole column."""
    out: list = []
    step = max(count * 2, 64)
    for start in range(0, min(len(series), 50 * step), step):  # then: enough looking
        values = series.iloc[start : start + step].to_numpy()
        out.extend(values[~pd.isna(values)][: count - len(out)].tolist())
        if len(out) == count:
            break
    return out


def numbers_in_text(series: pd.Series) -> np.ndarray:
    """Float per cell of a text column ('3,5' and ' 3.5 ' are 3.5); NaN where it is no number."""
    text = series.astype("string").str.strip().str.replace(",", ".", regex=False).str.lower()
    number = text.str.fullmatch(NUMBER_TEXT).fillna(False).to_numpy(dtype=bool)
    values = pd.to_numeric(text.where(number), errors="coerce").to_numpy(
        dtype=float, na_value=np.nan
    )
    beyond = number & np.isnan(values)  # beyond the double range: pandas says NaN, float() inf
    if beyond.any():
        negative = text[beyond].str.startswith("-").to_numpy(dtype=bool)
        values[beyond] = np.where(negative, -np.inf, np.inf)
    return values


def mostly_numbers(series: pd.Series, cells: list | None = None) -> bool:
    """A text column whose first cells are mostly numbers with many distinct values: a
    measurement with a few stray words ('unknown', 'n/k'), not a category. ``cells``: the
    column's ``first_present`` cells, when the caller has them already."""
    if not is_text(series):
        return False
    cells = first_present(series) if cells is None else cells
    if sum(_number(cell) is not None for cell in cells[:GLANCE]) <= 0.25 * len(cells[:GLANCE]):
        return False  # mostly words at the top: a category (or text), decided at a glance
    numbers = [_number(cell) for cell in cells]
    found = {n for n in numbers if n is not None}
    return len(numbers) - numbers.count(None) > 0.5 * len(numbers) and len(found) > FEW_DISTINCT


def covariate_kind(series: pd.Series, cells: list | None = None) -> str:
    """'numeric', 'categorical' or 'possibly categorical' (numeric with few distinct values).

    A text column that mostly holds numbers is 'numeric': its other cells are treated as
    missing, with a warning naming them (``engine.prepare.checks``)."""
    if pd.api.types.is_bool_dtype(series):
        return "categorical"
    if not pd.api.types.is_numeric_dtype(series):
        return "numeric" if mostly_numbers(series, cells) else "categorical"
    head = series.iloc[:2000].dropna().unique()  # most numeric columns show many values early
    with np.errstate(invalid="ignore"):
        if len(head) > FEW_DISTINCT or not np.all(np.mod(head, 1) == 0):
            return "numeric"
        distinct = series.dropna().unique()
        whole = np.all(np.mod(distinct, 1) == 0)
    if len(distinct) <= FEW_DISTINCT and whole:
        return "possibly categorical"
    return "numeric"


def date_like(series: pd.Series, cells: list | None = None) -> bool:
    """Dates (a date type, or text cells that are mostly written as dates)."""
    if pd.api.types.is_datetime64_any_dtype(series):
        return True
    if not is_text(series):
        return False
    cells = first_present(series) if cells is None else cells
    for part in (cells[:GLANCE], cells):
        matches = sum(bool(_DATE_TEXT.match(str(cell))) for cell in part)
        if not part or matches <= 0.9 * len(part):
            return False
    return True


def natural_sort_key(value) -> tuple:
    """Sort 'dose 2' before 'dose 10' and numbers by value. Texts equal but for case or leading
    zeros ('a' and 'A', '1' and '01') are then ordered by their characters, so the order is
    total: it never depends on the order the values were met in (a file's rows in memory, a
    database's GROUP BY), and every backend lists the levels alike."""
    if isinstance(value, int | float | np.integer | np.floating) and not isinstance(value, bool):
        return (0, float(value), (), "")
    text = str(value)
    parts = re.split(r"([0-9]+)", text.casefold())  # ASCII digits: int() reads them all
    keys = ((0, int(p), "") if p.isascii() and p.isdigit() else (1, 0, p) for p in parts if p)
    return (1, 0.0, tuple(keys), text)


def default_reference(series: pd.Series):
    """Most frequent level; ties go to the first level in natural order."""
    counts = series.dropna().value_counts()
    if counts.empty:
        return None
    top = counts[counts == counts.max()].index
    return sorted(top, key=natural_sort_key)[0]


def guess_day_first(series: pd.Series) -> bool:
    """True when some slash/dot/dash date has a first part above 12 (so it must be the day)."""
    text = series.dropna().astype(str).head(2000)
    first = text.str.extract(r"^\s*([0-9]{1,2})[/.\-][0-9]{1,2}[/.\-][0-9]{2,4}")[0].dropna()
    return bool(len(first)) and bool((first.astype(int) > 12).any())


class ColumnProfile:
    """Facts about one column of the suggestion sample, each computed once and only if asked."""

    def __init__(self, name, series: pd.Series):
        self.name = str(name)
        self.series = series

    @cached_property
    def text(self) -> bool:
        return is_text(self.series)

    @cached_property
    def numeric(self) -> bool:
        return pd.api.types.is_numeric_dtype(self.series) and not pd.api.types.is_bool_dtype(
            self.series
        )

    @cached_property
    def present(self) -> int:
        return int(self.series.notna().sum())

    @cached_property
    def distinct(self) -> int:
        try:
            return int(self.series.nunique())
        except TypeError:  # unhashable cells (lists from another reader): no role fits
            return 0

    @cached_property
    def cells(self) -> list:
        return first_present(self.series) if self.text else []

    @cached_property
    def dates(self) -> bool:
        return date_like(self.series, self.cells)

    @cached_property
    def kind(self) -> str:
        return covariate_kind(self.series, self.cells)

    @cached_property
    def duration_like(self) -> bool:
        if not self.numeric or self.present == 0 or self.distinct <= 2:
            return False
        with np.errstate(invalid="ignore"):
            return bool((self.series.dropna() >= 0).mean() > 0.95)


def _number(cell) -> float | None:
    if isinstance(cell, bool):
        return None
    if isinstance(cell, int | float | np.integer | np.floating):
        value = float(cell)
    else:
        text = number_text(cell)
        if not text or not (text[0].isdigit() or text[0] in "+-." or text[:3] == "inf"):
            return None  # most words fail here, without the cost of a regular expression
        if not _NUMBER_TEXT.match(text):
            return None
        value = float(text)
    return value if math.isfinite(value) else None
