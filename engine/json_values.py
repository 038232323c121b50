"""Turning numpy values into JSON-ready Python: floats, ints, str labels, None for NaN."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd


def json_float(value) -> float | None:
    """A Python float, or None when the value is missing, NaN or infinite."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def json_int(value) -> int | None:
    return None if value is None else int(value)


def json_label(value):
    """A group label as plain Python (numpy scalars unwrapped; None stays None)."""
    if value is None:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)  # a label 'inf' stays a label: JSON has no Infinity
    if isinstance(value, (str, int, float, bool)):
        return value
    return str(value)


def json_value(value):
    """Any scalar from a result table as JSON-ready Python (None for NaN / missing)."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, float | np.floating):
        return json_float(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    return value


def frame_records(frame: pd.DataFrame) -> list[dict]:
    """Rows of a frame as JSON-ready dicts (Python scalars, None for NaN / missing)."""
    columns = list(frame.columns)
    return [
        {c: json_value(v) for c, v in zip(columns, row, strict=True)}
        for row in frame.itertuples(index=False, name=None)
    ]
