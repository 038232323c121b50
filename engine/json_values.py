"""Turning numpy values into JSON-ready Python: floats, ints, str labels, None for NaN."""

from __future__ import annotations

import math

import numpy as np


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
        return value.item()
    if isinstance(value, (str, int, float, bool)):
        return value
    return str(value)
