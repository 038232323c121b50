"""Thin step curves before they go to the browser.

A Kaplan–Meier curve on 1,000,000 rows has up to a million vertices, and a browser drawing a step
line with a band through that many points freezes for most of a minute. At a chart's size most of
those vertices cannot be seen: a run of consecutive vertices whose heights all lie within half a
pixel of each other draws as one horizontal stretch followed by one drop. Keeping only the first
vertex of each run moves the drawn line by less than half a pixel: at every time the thinned step
function is within that distance, vertically, of the original, and so is every point of the
drawn path (its vertical connectors included). A monotone curve ``height`` pixels tall therefore
keeps at most about ``2 * height`` vertices, whatever the number of rows.

This is drawing, not statistics: tables and downloads keep every exact value.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

DEFAULT_TOLERANCE_PX = 0.5


def step_vertices_to_keep(
    heights: Sequence[np.ndarray],
    y_domain: tuple[float, float],
    height_px: float,
    tolerance_px: float = DEFAULT_TOLERANCE_PX,
) -> np.ndarray:
    """Boolean mask of the vertices to keep for step series sharing the same times.

    ``heights`` holds one array per series drawn with the same x values (an estimate and its
    lower and upper band). A vertex is dropped only when, in every series, it lies inside a run of
    consecutive vertices whose pixel rows (``tolerance_px`` high) are the same and is not the first
    of that run. The first and last vertices and every missing value are always kept.
    """
    lo, hi = y_domain
    span = hi - lo
    n = len(heights[0]) if heights else 0
    keep = np.zeros(n, dtype=bool)
    if n <= 2 or not span > 0 or not height_px > 0:
        keep[:] = True
        return keep
    keep[0] = keep[-1] = True
    scale = height_px / (span * tolerance_px)
    for values in heights:
        values = np.asarray(values, dtype=float)
        missing = ~np.isfinite(values)
        with np.errstate(invalid="ignore"):
            rows = np.floor((np.clip(values, lo, hi) - lo) * scale)
        rows[missing] = -1.0
        change = rows[1:] != rows[:-1]
        keep[1:] |= change
        keep |= missing
    return keep


def thin_step_frame(
    frame: pd.DataFrame,
    columns: Sequence[str],
    y_domain: tuple[float, float],
    height_px: float,
    group: str | None = None,
    tolerance_px: float = DEFAULT_TOLERANCE_PX,
) -> pd.DataFrame:
    """Rows of ``frame`` (sorted by time within each group) worth drawing at this chart height."""
    if frame.empty:
        return frame
    if group is None:
        parts = [frame]
    else:
        parts = [part for _, part in frame.groupby(group, sort=False, observed=True)]
    kept = []
    for part in parts:
        mask = step_vertices_to_keep(
            [part[c].to_numpy(dtype=float) for c in columns], y_domain, height_px, tolerance_px
        )
        kept.append(part[mask])
    return pd.concat(kept, ignore_index=True)


def thin_points(
    frame: pd.DataFrame,
    x: str,
    y: str,
    x_domain: tuple[float, float],
    y_domain: tuple[float, float],
    size_px: tuple[float, float],
    group: str | None = None,
) -> pd.DataFrame:
    """Keep one mark per pixel (and group): censoring ticks drawn on top of each other."""
    if frame.empty:
        return frame
    width_px, height_px = size_px
    x_span = (x_domain[1] - x_domain[0]) or 1.0
    y_span = (y_domain[1] - y_domain[0]) or 1.0
    with np.errstate(over="ignore", invalid="ignore"):  # a span beyond floats: one cell
        cells = pd.DataFrame(
            {
                "cx": np.floor((frame[x].to_numpy(float) - x_domain[0]) * width_px / x_span),
                "cy": np.floor((frame[y].to_numpy(float) - y_domain[0]) * height_px / y_span),
            },
            index=frame.index,
        )
    if group is not None:
        cells["g"] = frame[group].astype(str).to_numpy()
    return frame[~cells.duplicated()]
