"""Tidy result tables as JSON-ready rows for ``to_dict()``."""

from __future__ import annotations

import numpy as np
import pandas as pd


def _json_value(value):
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, float | np.floating) and not np.isfinite(value):
        return None
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    return value


def frame_records(frame: pd.DataFrame) -> list[dict]:
    """Rows of a frame as JSON-ready dicts (Python scalars, None for NaN / missing)."""
    columns = list(frame.columns)
    return [
        {c: _json_value(v) for c, v in zip(columns, row, strict=True)}
        for row in frame.itertuples(index=False, name=None)
    ]
