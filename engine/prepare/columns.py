"""Column-level helpers the pages need before any analysis: a profile of every column, and a
numeric column cut into groups at its quantiles."""

from __future__ import annotations

import numpy as np
import pandas as pd

from engine.errors import RoleError, preview_values


def column_kind(series: pd.Series) -> str:
    """Plain-words storage type: number, true/false, date or text."""
    if pd.api.types.is_bool_dtype(series):
        return "true/false"
    if pd.api.types.is_numeric_dtype(series):
        return "number"
    if pd.api.types.is_datetime64_any_dtype(series):
        return "date"
    return "text"


def column_profile(frame: pd.DataFrame, examples: int = 4) -> pd.DataFrame:
    """Type, missing count, distinct count and a few example values of every column."""
    rows = []
    for name in frame.columns:
        series = frame[name]
        present = series.dropna()
        rows.append(
            {
                "column": str(name),
                "type": column_kind(series),
                "missing": int(series.isna().sum()),
                "distinct": int(present.nunique()),
                "examples": ", ".join(str(v) for v in present.unique()[:examples]),
            }
        )
    return pd.DataFrame(rows, columns=["column", "type", "missing", "distinct", "examples"])


def cut_at_quantiles(values: pd.Series, groups: int, name: str | None = None) -> pd.Series:
    """Groups of about equal size between the quantiles of a numeric column, labelled by their
    interval (``"age (52.1, 60.3]"``), in increasing order; missing values stay missing.

    Quantile edges that coincide (many tied values) are merged, so fewer groups may result.
    """
    name = name if name is not None else str(values.name)
    if groups < 2:
        raise RoleError(f"Cutting '{name}' needs at least 2 groups, got {groups}.", column=name)
    numbers = pd.to_numeric(values, errors="coerce")
    bad = values[numbers.isna() & values.notna()]
    if len(bad):
        raise RoleError(
            f"Column '{name}' must be numeric to cut at quantiles; it holds "
            f"{preview_values(bad.unique())}. Choose a numeric column.",
            column=name,
            values=list(bad.unique()[:5]),
        )
    if numbers.nunique() < 2:
        raise RoleError(
            f"Column '{name}' has fewer than 2 distinct values; it cannot be cut into groups.",
            column=name,
        )
    edges = np.unique(np.quantile(numbers.dropna(), np.linspace(0, 1, groups + 1)))
    codes = np.searchsorted(edges, numbers.to_numpy(dtype=float), side="left") - 1
    codes = np.where(numbers.isna(), -1, np.clip(codes, 0, len(edges) - 2))
    labels = _interval_labels(name, edges)
    cut = pd.Categorical.from_codes(codes, categories=labels, ordered=True)
    return pd.Series(cut, index=values.index, name=name)


def _interval_labels(name: str, edges: np.ndarray) -> list[str]:
    """``name [a, b]`` for the first group, ``name (b, c]`` after, with just enough digits to
    tell the edges apart."""
    for digits in range(3, 18):
        text = [f"{edge:.{digits}g}" for edge in edges]
        if len(set(text)) == len(text):
            break
    return [
        f"{name} {'[' if i == 0 else '('}{text[i]}, {text[i + 1]}]" for i in range(len(edges) - 1)
    ]
