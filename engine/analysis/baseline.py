"""The baseline table: what the subjects looked like at the start, overall and by group.

For a categorical column, the count and percentage of each level (the percentage of the
non-missing values in that group); for a numeric column, the median with its quartiles and the
mean with its standard deviation (pandas' ``quantile`` with linear interpolation and ``std``
with n − 1, so the numbers are those pandas gives); for every column the number missing.

Optionally, beside each row, a standardised difference between two groups (Austin 2009,
*Statistics in Medicine* 28:3083–3107, section 3: for a numeric column the difference in means
over sqrt((s1² + s2²) / 2); for a level of a categorical column, the difference in proportions
over sqrt((p1(1 − p1) + p2(1 − p2)) / 2)), each group against the first one; or a test per column
(chi-squared test of independence for a categorical column, Kruskal–Wallis for a numeric column
summarised by medians, one-way analysis of variance for one summarised by means). In a randomised
trial, baseline differences arise by chance by design, so testing them is not advised
(``TEST_CAUTION``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from engine.errors import AnalysisError, RoleError, preview_values
from engine.json_values import json_float, json_label
from engine.prepare.roles import natural_sort_key
from engine.wording import format_number, format_p, format_percent

SUMMARIES = ("median", "mean")
COMPARISONS = (None, "smd", "test")
ROW_KEYS = (
    "variable", "level", "group", "count", "percent", "median", "q1", "q3", "mean", "sd",
    "missing",
)  # fmt: skip
TEST_CAUTION = (
    "In a randomised trial, differences between the arms at baseline arise by chance by design, "
    "so testing them is not advised; judge their size and clinical relevance instead (the "
    "CONSORT 2010 explanation makes this point; from memory)."
)
SMD_NOTE = (
    "Standardised differences (Austin 2009) compare each group with the first; an absolute value "
    "above 0.1 is often read as a meaningful imbalance (common practice)."
)


@dataclass(frozen=True)
class BaselineRow:
    """One row of the table: a numeric column (``level`` None) or one level of a categorical
    column, in one group (``group`` None: all rows)."""

    variable: str
    level: object
    group: object
    count: int
    percent: float | None
    median: float | None
    q1: float | None
    q3: float | None
    mean: float | None
    sd: float | None
    missing: int

    def to_dict(self) -> dict:
        return {key: getattr(self, key) for key in ROW_KEYS}


@dataclass(frozen=True)
class BaselineTable:
    """The rows of the baseline table, the group column, and any differences or tests."""

    group: str | None
    groups: tuple
    variables: tuple[str, ...]
    kinds: Mapping[str, str]  # variable -> "numeric" or "categorical"
    summary: str
    compare: str | None
    rows: tuple[BaselineRow, ...]
    sizes: tuple[int, ...] = ()  # rows in all and in each group, in the order of ``groups``
    balance: tuple[dict, ...] = field(default_factory=tuple)

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([r.to_dict() for r in self.rows], columns=list(ROW_KEYS))

    def to_dict(self) -> dict:
        out = {"group": self.group, "rows": [r.to_dict() for r in self.rows]}
        if self.compare is not None:
            out["balance"] = [dict(b) for b in self.balance]
        return out

    @classmethod
    def from_dict(cls, section: Mapping, summary: str = "median") -> BaselineTable:
        """The table back from its JSON form (the report is built from the JSON): kinds from
        the rows (a numeric column has no level), group sizes as values plus missing."""
        rows = tuple(BaselineRow(**{k: r[k] for k in ROW_KEYS}) for r in section["rows"])
        variables = tuple(dict.fromkeys(r.variable for r in rows))
        numeric = {r.variable for r in rows if r.level is None}
        kinds = {v: "numeric" if v in numeric else "categorical" for v in variables}
        groups = tuple(dict.fromkeys(r.group for r in rows if r.group is not None))
        first = [r for r in rows if r.variable == variables[0]] if variables else []
        sizes = []
        for group in (None, *groups):
            mine = [r for r in first if r.group == group]
            sizes.append(sum(r.count for r in mine) + (mine[0].missing if mine else 0))
        balance = tuple(section.get("balance") or ())
        compare = None
        if "balance" in section:
            compare = "test" if any("p_value" in b for b in balance) else "smd"
        return cls(
            group=section.get("group"),
            groups=groups,
            variables=variables,
            kinds=kinds,
            summary=summary,
            compare=compare,
            rows=rows,
            sizes=tuple(sizes),
            balance=balance,
        )


def column_kind(series: pd.Series, categorical: bool) -> str:
    """Numbers are summarised as numbers unless declared categorical; text, true/false and
    category columns by their levels. Dates are refused: say what they stand for first."""
    if pd.api.types.is_datetime64_any_dtype(series):
        raise RoleError(
            f"Column '{series.name}' holds dates; a baseline table summarises numbers and "
            "categories. Leave it out, or compute an age or a duration from it first.",
            column=str(series.name),
        )
    numeric = pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)
    if numeric and not categorical and not isinstance(series.dtype, pd.CategoricalDtype):
        return "numeric"
    return "categorical"


def _levels(series: pd.Series) -> list:
    if isinstance(series.dtype, pd.CategoricalDtype):
        present = set(series.dropna().unique())
        return [c for c in series.cat.categories if c in present]
    return sorted(series.dropna().unique(), key=natural_sort_key)


def baseline_table(
    values: pd.DataFrame,
    groups: pd.Series | None = None,
    *,
    group_name: str | None = None,
    categorical: Sequence[str] = (),
    summary: str = "median",
    compare: str | None = None,
) -> BaselineTable:
    """The baseline table of every column of ``values``, overall and per value of ``groups``
    (aligned with ``values``; rows without a group count in "all rows" only)."""
    if summary not in SUMMARIES:
        raise AnalysisError(f"Baseline summary must be 'median' or 'mean', got {summary!r}.")
    if compare not in COMPARISONS:
        raise AnalysisError(f"Baseline comparison must be 'smd', 'test' or none, got {compare!r}.")
    if values.shape[1] == 0:
        raise AnalysisError(
            "The baseline table needs at least one column to describe; choose its variables."
        )
    if len(values) == 0:
        raise AnalysisError("The baseline table has no rows to describe.")
    kinds = {str(c): column_kind(values[c], c in categorical) for c in values.columns}
    levels_of_group: list = []
    if groups is not None:
        levels_of_group = _levels(groups)
    if compare is not None and len(levels_of_group) < 2:
        raise AnalysisError(
            "Standardised differences and tests compare groups: choose a group column with at "
            f"least two values (found {preview_values(levels_of_group)})."
        )
    subsets = [(None, np.ones(len(values), dtype=bool))]
    if groups is not None:
        group_values = groups.to_numpy(dtype=object)
        subsets += [(g, group_values == g) for g in levels_of_group]
    rows: list[BaselineRow] = []
    for column in values.columns:
        series = values[column]
        kind = kinds[str(column)]
        levels = _levels(series) if kind == "categorical" else [None]
        for group, mask in subsets:
            part = series[mask]
            rows += _rows(str(column), part, kind, levels, json_label(group))
    balance: list[dict] = []
    if compare == "smd":
        balance = _standardised_differences(rows, kinds, [json_label(g) for g in levels_of_group])
    elif compare == "test":
        balance = [
            _test(str(c), values[c], groups, kinds[str(c)], summary, levels_of_group)
            for c in values.columns
        ]
    return BaselineTable(
        group=group_name,
        groups=tuple(json_label(g) for g in levels_of_group),
        variables=tuple(str(c) for c in values.columns),
        kinds=kinds,
        summary=summary,
        compare=compare,
        rows=tuple(rows),
        sizes=tuple(int(mask.sum()) for _, mask in subsets),
        balance=tuple(balance),
    )


def _beyond_floats_ignored(statistic) -> float:
    """A mean or SD of values whose sum or squares overflow is infinite, shown as not
    estimable (null), without numpy's overflow warning on the user's terminal."""
    with np.errstate(over="ignore", invalid="ignore"):
        return float(statistic())


def _rows(variable: str, part: pd.Series, kind: str, levels: list, group) -> list[BaselineRow]:
    missing = int(part.isna().sum())
    present = part.dropna()
    if kind == "numeric":
        numbers = present.astype(float)
        n = len(numbers)
        quartiles = numbers.quantile([0.25, 0.5, 0.75]) if n else pd.Series([np.nan] * 3)
        return [
            BaselineRow(
                variable=variable,
                level=None,
                group=group,
                count=n,
                percent=None,
                median=json_float(quartiles.iloc[1]),
                q1=json_float(quartiles.iloc[0]),
                q3=json_float(quartiles.iloc[2]),
                mean=json_float(_beyond_floats_ignored(numbers.mean)) if n else None,
                sd=json_float(_beyond_floats_ignored(numbers.std)) if n > 1 else None,
                missing=missing,
            )
        ]
    counts = present.value_counts()
    known = len(present)
    return [
        BaselineRow(
            variable=variable,
            level=json_label(level),
            group=group,
            count=int(counts.get(level, 0)),
            percent=json_float(100.0 * counts.get(level, 0) / known) if known else None,
            median=None,
            q1=None,
            q3=None,
            mean=None,
            sd=None,
            missing=missing,
        )
        for level in levels
    ]


def standardised_difference_means(mean1, sd1, mean2, sd2) -> float | None:
    """Austin (2009), eq. for continuous covariates: (m1 − m2) / sqrt((s1² + s2²) / 2)."""
    if None in (mean1, sd1, mean2, sd2):
        return None
    pooled = math.sqrt((sd1**2 + sd2**2) / 2.0)
    return None if pooled == 0 else (mean1 - mean2) / pooled


def standardised_difference_proportions(p1, p2) -> float | None:
    """Austin (2009), eq. for dichotomous covariates: (p1 − p2) / sqrt((p1q1 + p2q2) / 2)."""
    if None in (p1, p2):
        return None
    pooled = math.sqrt((p1 * (1 - p1) + p2 * (1 - p2)) / 2.0)
    return None if pooled == 0 else (p1 - p2) / pooled


def _standardised_differences(rows, kinds, groups) -> list[dict]:
    by_key = {(r.variable, r.level, r.group): r for r in rows}
    reference = groups[0]
    out = []
    for row in rows:
        if row.group is None or row.group == reference:
            continue
        base = by_key[(row.variable, row.level, reference)]
        if kinds[row.variable] == "numeric":
            value = standardised_difference_means(row.mean, row.sd, base.mean, base.sd)
        else:
            p1 = None if row.percent is None else row.percent / 100.0
            p2 = None if base.percent is None else base.percent / 100.0
            value = standardised_difference_proportions(p1, p2)
        out.append(
            {
                "variable": row.variable,
                "level": row.level,
                "group": row.group,
                "reference_group": reference,
                "standardized_difference": json_float(value),
            }
        )
    return out


def _test(variable, series, groups, kind, summary, levels) -> dict:
    frame = pd.DataFrame({"value": series.to_numpy(), "group": groups.to_numpy(dtype=object)})
    frame = frame.dropna()
    frame = frame[frame["group"].isin(levels)]
    result = {"variable": variable, "test": None, "statistic": None, "df": None, "p_value": None}
    try:
        if kind == "categorical":
            table = pd.crosstab(frame["value"], frame["group"])
            if table.shape[0] < 2 or table.shape[1] < 2:
                return {**result, "test": "chi-squared (not computable: one level or group)"}
            test = stats.chi2_contingency(table.to_numpy(), correction=False)
            return {
                **result,
                "test": "chi-squared",
                "statistic": json_float(test.statistic),
                "df": float(test.dof),
                "p_value": json_float(test.pvalue),
            }
        samples = [frame.loc[frame["group"] == g, "value"].astype(float) for g in levels]
        samples = [s.to_numpy() for s in samples if len(s)]
        if len(samples) < 2:
            return {**result, "test": "not computable: fewer than two groups with values"}
        if summary == "median":
            with np.errstate(divide="ignore", invalid="ignore"):  # every value tied: no test
                test = stats.kruskal(*samples)
            name = "Kruskal–Wallis"
        else:
            test = stats.f_oneway(*samples)
            name = "analysis of variance"
        df = float(len(samples) - 1)
        return {
            **result,
            "test": name,
            "statistic": json_float(test.statistic),
            "df": df,
            "p_value": json_float(test.pvalue),
        }
    except ValueError as error:  # e.g. every value identical
        return {**result, "test": f"not computable: {error}"}


# --- the table as people read it -----------------------------------------------------------------


def display_frame(
    table: BaselineTable,
    labels: Mapping[str, str] | None = None,
    digits: int = 1,
    *,
    exact: bool = False,
) -> pd.DataFrame:
    """One line per numeric column or level, one column per group: "12 (34.5%)",
    "61.0 (54.0 to 68.0)" or "61.2 (8.9)", a "missing" line where values are missing, and the
    standardised difference or the test's p-value last. Rounded by ``engine.wording``.

    With ``exact`` the same layout holds each cell's leading number unrounded (the count, the
    median or the mean, the difference, the p-value), for the report's ``data-value``."""
    labels = dict(labels or {})
    rows_by = {(r.variable, r.level, r.group): r for r in table.rows}
    group_titles = [(None, f"All rows (n = {table.sizes[0]:,})")] + [
        (g, f"{g} (n = {n:,})") for g, n in zip(table.groups, table.sizes[1:], strict=True)
    ]
    balance = {(b["variable"], b.get("level"), b.get("group")): b for b in table.balance}
    tests = {b["variable"]: b for b in table.balance} if table.compare == "test" else {}
    lines = []
    for variable in table.variables:
        name = f"{variable} ({labels[variable]})" if labels.get(variable) else variable
        kind = table.kinds[variable]
        levels = [r.level for r in table.rows if r.variable == variable and r.group is None]
        for level in levels:
            if kind == "numeric":
                what = "median (quartiles)" if table.summary == "median" else "mean (SD)"
                line = {"Variable": (name, None), "Level": (what, None)}
            else:
                line = {"Variable": (name, None), "Level": (str(level), None)}
            for group, title in group_titles:
                row = rows_by.get((variable, level, group))
                line[title] = _cell(row, kind, table.summary, digits)
            line.update(_balance_cells(table, balance, tests, variable, level))
            lines.append(line)
        missing = {g: rows_by[(variable, levels[0], g)].missing for g, _ in group_titles}
        if any(missing.values()):
            line = {"Variable": (name, None), "Level": ("missing", None)}
            line.update({title: (f"{missing[g]:,}", missing[g]) for g, title in group_titles})
            line.update({k: ("", None) for k in _balance_titles(table)})
            lines.append(line)
    columns = ["Variable", "Level", *[t for _, t in group_titles], *_balance_titles(table)]
    pick = 1 if exact else 0
    return pd.DataFrame(
        [{k: v[pick] for k, v in line.items()} for line in lines], columns=columns, dtype=object
    )


def _cell(row: BaselineRow | None, kind: str, summary: str, digits: int) -> tuple[str, object]:
    if row is None:
        return "", None
    if kind == "categorical":
        percent = "" if row.percent is None else f" ({format_percent(row.percent / 100.0)})"
        return f"{row.count:,}{percent}", row.count
    if row.count == 0:
        return "no values", None
    if summary == "median":
        text = (
            f"{format_number(row.median, digits)} ({format_number(row.q1, digits)} to "
            f"{format_number(row.q3, digits)})"
        )
        return text, row.median
    sd = "" if row.sd is None else f" ({format_number(row.sd, digits)})"
    return f"{format_number(row.mean, digits)}{sd}", row.mean


def _balance_titles(table: BaselineTable) -> list[str]:
    if table.compare == "smd":
        return [f"Standardised difference, {g} vs {table.groups[0]}" for g in table.groups[1:]]
    if table.compare == "test":
        return ["Test", "p"]
    return []


def _balance_cells(table, balance, tests, variable, level) -> dict:
    titles = _balance_titles(table)
    if table.compare == "smd":
        out = {}
        for title, group in zip(titles, table.groups[1:], strict=True):
            value = balance.get((variable, level, group), {}).get("standardized_difference")
            out[title] = (format_number(value, 2), value)
        return out
    if table.compare == "test":
        first = level == next(
            r.level for r in table.rows if r.variable == variable and r.group is None
        )
        test = tests.get(variable, {})
        if not first:
            return {"Test": ("", None), "p": ("", None)}
        p = test.get("p_value")
        return {"Test": (test.get("test") or "", None), "p": (format_p(p), p)}
    return {}
