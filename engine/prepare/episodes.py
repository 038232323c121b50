"""Episodes (counting-process rows) and follow-up split at chosen times.

An episode is one row (entry, time] of a subject, holding the covariate values that applied then;
the id role says which rows belong to one subject. The risk sets of Kaplan–Meier, the log-rank
family and the Cox model already count a row at risk only on (entry, time], so several rows per
subject need nothing more than a check that they fit together and, for the Cox model, a
variance that allows the rows of one subject to be dependent (``fit_cox(clusters=...)``).

Splitting follow-up at times c1 < c2 < ... turns each row into episodes that end at the cuts (no
event on the pieces that end at a cut), which changes no risk set: the refitted Cox model is the
same model. It becomes a different model once a variable's effect is allowed to differ between
the periods (a column per period holding the variable inside that period, zero outside), the
usual remedy when the proportional-hazards check fails for that variable.
"""

from __future__ import annotations

import heapq
import itertools
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.cox.diagnostics import PHTest, proportional_hazards_test
from engine.cox.fit import CoxResult, cox_json, fit_cox
from engine.errors import SettingError, preview_values

PERIOD = "_period"  # the period index of an episode after a split (0 before the first cut)


@dataclass(frozen=True)
class EpisodeSummary:
    """How the rows group into subjects."""

    subjects: int
    episodes: int
    subjects_with_several: int
    most_events: int  # the largest number of events of one subject (above 1: recurrent events)
    overlapping: int  # subjects whose episodes overlap in time
    overlapping_ids: tuple
    repeated_ids: tuple  # a few of the ids with several rows

    def to_dict(self) -> dict:
        return {
            "subjects": int(self.subjects),
            "episodes": int(self.episodes),
            "subjects_with_several": int(self.subjects_with_several),
            "most_events": int(self.most_events),
            "overlapping": int(self.overlapping),
        }

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([self.to_dict()])


def episode_summary(ids, time, event, entry=None) -> EpisodeSummary:
    """Subjects, episodes and whether a subject's episodes overlap (an episode starting before
    the previous one of the same subject ended; only with entry times, since rows that all
    start at 0 are gap times or separate records rather than episodes)."""
    ids = pd.Series(np.asarray(ids, dtype=object))
    time = np.asarray(time, dtype=float)
    event = np.asarray(event)
    start = np.zeros(len(time)) if entry is None else np.asarray(entry, dtype=float)
    codes, uniques = pd.factorize(ids)
    counts = np.bincount(codes[codes >= 0], minlength=len(uniques))
    events = np.bincount(codes[codes >= 0], (event[codes >= 0] == 1), minlength=len(uniques))
    order = np.lexsort((time, start, codes))
    same = codes[order][1:] == codes[order][:-1]
    overlap = same & (start[order][1:] < time[order][:-1]) & (entry is not None)
    bad = np.unique(codes[order][1:][overlap])
    return EpisodeSummary(
        subjects=len(uniques),
        episodes=len(time),
        subjects_with_several=int((counts > 1).sum()),
        most_events=int(events.max()) if len(events) else 0,
        overlapping=len(bad),
        overlapping_ids=smallest_ids(uniques[bad], 5),
        repeated_ids=smallest_ids(uniques[counts > 1], 6),
    )


def smallest_ids(ids, k: int) -> tuple:
    """The ``k`` smallest ids (numbers by value, text by code point): examples that do not
    depend on the rows' order, so a database, which keeps none, shows the same ones."""
    values = list(ids)
    try:
        return tuple(heapq.nsmallest(k, values))
    except TypeError:  # mixed kinds in one column
        return tuple(heapq.nsmallest(k, values, key=lambda v: (type(v).__name__, str(v))))


def episode_warnings(summary: EpisodeSummary, id_column: str, has_entry: bool) -> list[str]:
    """Plain sentences on several rows per subject, for the data checks."""
    notes = []
    if summary.subjects_with_several == 0:
        return notes
    if has_entry:
        notes.append(
            f"Column {id_column!r} repeats {summary.subjects_with_several} id(s) "
            f"({preview_values(summary.repeated_ids)}): their rows are read as episodes "
            f"(entry, time] of one subject ({summary.episodes} rows, {summary.subjects} "
            "subjects). The Cox model's standard errors are then robust "
            "(clustered by subject) when there are more subjects than model terms."
        )
    else:
        notes.append(
            f"Column {id_column!r} repeats {summary.subjects_with_several} id(s) "
            f"({preview_values(summary.repeated_ids)}; {summary.episodes} rows, "
            f"{summary.subjects} subjects) and no entry-time column is "
            "set: each row counts from time 0. For episodes of one subject set the entry time; "
            "the Cox model's standard errors are robust (clustered by subject) either way, when "
            "there are more subjects than model terms."
        )
    if summary.overlapping:
        notes.append(
            f"{summary.overlapping} subject(s) have episodes that overlap in time (for example "
            f"ids {preview_values(summary.overlapping_ids)}); a subject should be at risk once "
            "at any time. Check the entry and exit times of those rows."
        )
    return notes


def split_at_times(
    frame: pd.DataFrame,
    times: Sequence[float],
    *,
    time_col: str = "_time",
    event_col: str = "_event",
    entry_col: str = "_entry",
    id_col: str = "_id",
) -> pd.DataFrame:
    """Each row cut into episodes at the ``times`` inside its (entry, time] interval.

    The result keeps every column, with ``entry_col`` the episode's start, ``time_col`` its
    end, the event only on the last piece, ``PERIOD`` the index of the period the episode lies
    in, and ``id_col`` the subject (the row label when the frame had no id column), so a robust
    variance can still cluster by subject. Without entry times a first piece starts at −inf,
    not 0: every row is at risk from the start, as in the unsplit model, so a row at time 0
    keeps its place in the risk set at time 0 instead of becoming an empty (0, 0] interval.
    """
    cuts = np.unique(np.asarray(list(times), dtype=float))
    if len(cuts) == 0 or not np.all(np.isfinite(cuts)) or np.any(cuts <= 0):
        raise SettingError(
            f"Split times {list(times)!r} must be positive numbers (at least one); give the "
            "times, in the data's time unit, after which an effect may change."
        )
    time = frame[time_col].to_numpy(dtype=float)
    entry = (
        frame[entry_col].to_numpy(dtype=float)
        if entry_col in frame.columns
        else np.full(len(frame), -np.inf)
    )
    # Period of the entry (cut c belongs to the period before it) and of the exit.
    first = np.searchsorted(cuts, entry, side="right")
    last = np.searchsorted(cuts, time, side="left")
    pieces = last - first + 1
    source = np.repeat(np.arange(len(frame)), pieces)
    period = first[source] + (
        np.arange(len(source)) - np.repeat(np.cumsum(pieces) - pieces, pieces)
    )
    bounds = np.concatenate([[-np.inf], cuts, [np.inf]])
    out = frame.iloc[source].copy()
    out[entry_col] = np.maximum(entry[source], bounds[period])
    out[time_col] = np.minimum(time[source], bounds[period + 1])
    is_last = period == last[source]
    out[event_col] = np.where(is_last, frame[event_col].to_numpy()[source], 0)
    out[PERIOD] = period
    if id_col not in frame.columns:
        out[id_col] = frame.index.to_numpy()[source]
    return out


def period_labels(times: Sequence[float]) -> list[str]:
    """Plain labels of the periods between the cuts: 'up to 12', '12 to 24', 'after 24'."""
    cuts = [f"{c:g}" for c in np.unique(np.asarray(list(times), dtype=float))]
    labels = [f"up to {cuts[0]}"]
    labels += [f"{a} to {b}" for a, b in itertools.pairwise(cuts)]
    return [*labels, f"after {cuts[-1]}"]


@dataclass(frozen=True)
class SplitFit:
    """The Cox model refitted on follow-up split at ``times``, the chosen variables' effects
    allowed to differ between the periods, with the proportional-hazards check repeated."""

    times: tuple[float, ...]
    changing: tuple[str, ...]
    periods: tuple[str, ...]
    episodes: int  # rows after the split
    result: CoxResult
    ph_check: PHTest

    def to_frame(self) -> pd.DataFrame:
        return self.result.to_frame()

    def to_dict(self) -> dict:
        return {
            "times": [float(t) for t in self.times],
            "changing": list(self.changing),
            "periods": list(self.periods),
            "episodes": int(self.episodes),
            "model": cox_json(self.result, self.ph_check),
        }


def _per_period_columns(split: pd.DataFrame, variable: str, labels, reference=None):
    """Columns holding ``variable`` (or each non-reference level's indicator) inside one period
    and 0 outside, named '<variable>, <period>' ('<variable>: <level> vs <ref>, <period>')."""
    period = split[PERIOD].to_numpy()
    values = split[variable]
    columns = {}
    if isinstance(values.dtype, pd.CategoricalDtype):
        levels = list(values.cat.categories)
        ref = reference if reference is not None else levels[0]
        indicators = {
            f"{variable}: {level} vs {ref}": (values == level).to_numpy(dtype=float)
            for level in levels
            if str(level) != str(ref)
        }
        missing = values.isna().to_numpy()
    else:
        indicators = {variable: values.to_numpy(dtype=float)}
        missing = np.isnan(indicators[variable])
    for name, column in indicators.items():
        for k, label in enumerate(labels):
            inside = np.where(period == k, column, 0.0)
            columns[f"{name}, {label}"] = np.where(missing, np.nan, inside)
    return columns


def fit_split(
    frame: pd.DataFrame,
    covariates: Sequence[str],
    times: Sequence[float],
    changing: Sequence[str] = (),
    *,
    ph_time_scale: str = "survival",
    **cox_options,
) -> SplitFit:
    """Split the follow-up at ``times``, give each variable in ``changing`` one coefficient per
    period, refit (clustered by subject when a subject has several episodes) and repeat the
    proportional-hazards check. ``cox_options`` are those of ``fit_cox`` (categorical, reference,
    strata, ties, confidence, variance); ``entry`` and ``clusters`` are set here."""
    unknown = [v for v in changing if v not in covariates]
    if unknown:
        raise SettingError(
            f"The effects allowed to change, {preview_values(unknown)}, must be covariates of the "
            f"model ({preview_values(list(covariates), 8)}); choose among those."
        )
    labels = period_labels(times)
    split = split_at_times(frame, times)
    reference = dict(cox_options.get("reference") or {})
    model_covariates = []
    added = {}
    for variable in covariates:
        if variable in changing:
            columns = _per_period_columns(split, variable, labels, reference.get(variable))
            added.update(columns)
            model_covariates.extend(columns)
        else:
            model_covariates.append(variable)
    work = split.assign(**added) if added else split
    categorical = [c for c in cox_options.pop("categorical", ()) if c not in changing]
    if "reference" in cox_options:
        cox_options["reference"] = {k: v for k, v in reference.items() if k not in changing} or None
    # Splitting makes every subject's id repeat, so "auto" decides on the rows before the split.
    if cox_options.get("variance", "auto") == "auto":
        ids = frame["_id"] if "_id" in frame.columns else None
        repeats = ids is not None and bool(ids.dropna().duplicated().any())
        cox_options["variance"] = "robust" if repeats else "model"
    result = fit_cox(
        work,
        model_covariates,
        categorical=categorical,
        entry="_entry",
        clusters="_id",
        **cox_options,
    )
    return SplitFit(
        times=tuple(float(t) for t in np.unique(np.asarray(list(times), dtype=float))),
        changing=tuple(changing),
        periods=tuple(labels),
        episodes=len(work),
        result=result,
        ph_check=proportional_hazards_test(result, ph_time_scale),
    )
