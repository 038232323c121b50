"""Landmark analysis: curves and comparisons among the subjects still at risk at a chosen time.

Comparing groups defined by something that happens during follow-up (a response, a transplant)
from time 0 favours the group whose members had to survive long enough to join it. A landmark
analysis starts the clock at a fixed time L instead and keeps only the subjects at risk then.

Convention: a subject is kept when it is still at risk just after L, that is ``_time > L`` (and,
with delayed entry, ``_entry <= L``). Subjects with their event (of any cause, when ``_cause`` is
set) or censoring at L itself, or before, are excluded and counted; so are subjects who enter
only after L.

Time scale: by default ``_time`` is measured from the landmark (``_time - L``; ``_entry`` is
then dropped, since everyone kept is at risk from the new time 0). With
``time_from_landmark=False`` the original scale is kept and ``_entry`` is set to L, so curves start
at L and any estimator that honours delayed entry conditions on being at risk at L.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.errors import AnalysisError, NoRowsError
from engine.json_values import frame_records

COUNT_COLUMNS = [
    "group",
    "n_rows",
    "n_kept",
    "n_events_before",
    "n_censored_before",
    "n_entered_after",
]


@dataclass(frozen=True)
class LandmarkData:
    """The prepared frame restricted to subjects at risk at the landmark, with exclusion counts."""

    landmark: float
    time_from_landmark: bool
    frame: pd.DataFrame
    counts: pd.DataFrame  # COUNT_COLUMNS; one row per group and a final row (group None) for all

    @property
    def n_kept(self) -> int:
        return int(self.counts["n_kept"].iloc[-1])

    @property
    def n_excluded(self) -> int:
        return int(self.counts["n_rows"].iloc[-1] - self.counts["n_kept"].iloc[-1])

    def to_frame(self) -> pd.DataFrame:
        return self.counts.copy()

    def to_dict(self) -> dict:
        return {
            "landmark": float(self.landmark),
            "time_from_landmark": bool(self.time_from_landmark),
            "n_kept": self.n_kept,
            "n_excluded": self.n_excluded,
            "counts": frame_records(self.counts),
        }


def landmark(frame: pd.DataFrame, at: float, *, time_from_landmark: bool = True) -> LandmarkData:
    """Keep the subjects still at risk just after time ``at``; count the others by reason."""
    if not (np.isfinite(at) and at >= 0):
        raise AnalysisError(f"The landmark time must be a number >= 0; got {at!r}.")
    for column in ("_time", "_event"):
        if column not in frame.columns:
            raise AnalysisError(
                f"The prepared frame has no {column!r} column; prepare the data first."
            )
    time = frame["_time"].to_numpy(dtype=float)
    if not np.isfinite(time).any():
        raise NoRowsError()
    if at >= np.nanmax(time):
        raise AnalysisError(
            f"The landmark {at:g} is at or after the last follow-up time ({np.nanmax(time):g}); "
            "no one is at risk then. Choose an earlier landmark."
        )
    # With competing causes, an event of any cause before L ends follow-up: count it as an event.
    if "_cause" in frame.columns:
        had_event = frame["_cause"].notna().to_numpy()
    else:
        had_event = frame["_event"].to_numpy() == 1
    ended_before = time <= at
    entered_after = (
        frame["_entry"].to_numpy(dtype=float) > at
        if "_entry" in frame.columns
        else np.zeros(len(frame), dtype=bool)
    )
    keep = ~ended_before & ~entered_after
    reasons = np.column_stack(
        [
            np.ones(len(frame), dtype=bool),
            keep,
            ended_before & had_event,
            ended_before & ~had_event,
            ~ended_before & entered_after,
        ]
    )
    names = COUNT_COLUMNS[1:]
    rows = []
    if "_group" in frame.columns:
        group = frame["_group"]
        cat = group if isinstance(group.dtype, pd.CategoricalDtype) else group.astype("category")
        codes = cat.cat.codes.to_numpy()
        known = codes >= 0
        k = len(cat.cat.categories)
        counts = np.stack(
            [np.bincount(codes[known], weights=reasons[known, j], minlength=k) for j in range(5)],
            axis=1,
        )
        for level, row in zip(cat.cat.categories, counts, strict=True):
            rows.append({"group": str(level), **dict(zip(names, map(int, row), strict=True))})
    totals = reasons.sum(axis=0)
    rows.append({"group": None, **dict(zip(names, map(int, totals), strict=True))})
    kept = frame.loc[keep].copy()
    if time_from_landmark:
        kept["_time"] = kept["_time"] - at
        kept = kept.drop(columns="_entry", errors="ignore")
    else:
        kept["_entry"] = float(at)
    return LandmarkData(
        landmark=float(at),
        time_from_landmark=bool(time_from_landmark),
        frame=kept,
        counts=pd.DataFrame(rows, columns=COUNT_COLUMNS),
    )
