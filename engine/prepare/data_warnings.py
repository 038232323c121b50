"""Warnings about the rows kept by ``engine.prepare.checks.prepare``: nothing here excludes a row.

Thresholds are rules of thumb (common practice), stated in each message.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from engine.errors import shown_value
from engine.prepare.roles import Roles, convert_time
from engine.text_safety import hidden_characters_warning

FEW_EVENTS = 10  # common practice: fewer than ~10 events per group gives unstable estimates
TINY_GROUP = 5


def group_counts(prepared: pd.DataFrame) -> pd.DataFrame:
    """Rows, events, competing events and censored per group (one row "all" without a group
    role). A competing event (a row of another named cause) is not counted as censored."""
    event = prepared["_event"].to_numpy()
    competing = np.zeros(len(event), dtype=np.int64)
    if "_cause" in prepared:
        competing = (prepared["_cause"].notna().to_numpy() & (event == 0)).astype(np.int64)
    if "_group" in prepared:
        groups = prepared["_group"].cat
        codes = groups.codes.to_numpy()
        has_group = codes >= 0
        size = len(groups.categories)

        def per_group(weights=None):
            chosen = None if weights is None else weights[has_group]
            return np.bincount(codes[has_group], chosen, size).astype(np.int64)

        table = pd.DataFrame(
            {"n": per_group(), "events": per_group(event), "competing": per_group(competing)},
            index=pd.Index(list(groups.categories), dtype=object),
        )
    else:
        table = pd.DataFrame(
            {"n": [len(event)], "events": [int(event.sum())], "competing": [int(competing.sum())]},
            index=["all"],
        )
    table["censored"] = table["n"] - table["events"] - table["competing"]
    table = table.rename_axis("group").reset_index()
    return table.astype({c: "int64" for c in ("n", "events", "competing", "censored")})


def warnings_on_used(prepared, frame, roles: Roles, time, counts) -> list[str]:
    """Zero times, unit hints, no events, small groups, rows without a group, repeated ids."""
    id_notes = []
    if roles.id and _may_repeat(frame[roles.id]):
        from engine.prepare.episodes import episode_summary, episode_warnings

        used = prepared[prepared["_id"].notna()]
        summary = episode_summary(
            used["_id"],
            used["_time"],
            used["_event"],
            used["_entry"] if "_entry" in used.columns else None,
        )
        id_notes = episode_warnings(summary, roles.id, "_entry" in used.columns)
    return warnings_from_summary(
        roles,
        zeros=int((time == 0).sum()),
        times=time,
        events=int(prepared["_event"].sum()) if len(prepared) else None,
        counts=counts,
        no_group=int(prepared["_group"].isna().sum()) if roles.group else 0,
        hidden=_hidden_characters_warning(prepared),
        id_notes=id_notes,
    )


def warnings_from_summary(
    roles: Roles, *, zeros: int, times, events, counts, no_group: int, hidden, id_notes=()
) -> list[str]:
    """The warnings from what they depend on: rows at time 0, the times (distinct values are
    enough), events among the rows used (None without rows), rows per group, rows without a
    group, the hidden-characters warning (or None) and the notes on the id column's episodes;
    a database computes these."""
    notes = []
    if zeros:
        notes.append(
            f"{zeros} row(s) have time 0; they are kept, but check whether they are real "
            "(an event on the first day) or data-entry placeholders."
        )
    if roles.time and len(times):
        notes.extend(_unit_hints(np.asarray(times, dtype=float), roles))
    if events == 0:
        notes.append("There are no events among the rows used; curves stay at 1.")
    if roles.group:
        for label, n, events in zip(counts["group"], counts["n"], counts["events"], strict=True):
            if n < TINY_GROUP:
                notes.append(f"Group {shown_value(label)} has only {int(n)} row(s).")
            elif events < FEW_EVENTS:
                notes.append(
                    f"Group {shown_value(label)} has {int(events)} event(s); with fewer than "
                    f"{FEW_EVENTS} events its estimates are unstable (common practice rule)."
                )
        if no_group:
            notes.append(
                f"{no_group} row(s) have no value in the group column {roles.group!r}; they "
                "appear in overall results but in no group."
            )
    if hidden:
        notes.append(hidden)
    notes.extend(id_notes)
    return notes


def labels_warning(labels) -> str | None:
    """The hidden-characters warning over the data's names, groups and levels."""
    return hidden_characters_warning(labels, "the data (names, groups or levels)")


def _hidden_characters_warning(prepared: pd.DataFrame) -> str | None:
    """Labels (column names, group, strata and category levels, causes) holding direction
    controls or control characters, which every display shows as codes (engine.text_safety)."""
    labels = [str(c) for c in prepared.columns]
    for column in prepared.columns:
        values = prepared[column]
        if isinstance(values.dtype, pd.CategoricalDtype):
            labels.extend(str(v) for v in values.cat.categories)
        elif column == "_cause":
            labels.extend(str(v) for v in pd.unique(values) if v is not None)
    return labels_warning(labels)


def _may_repeat(ids: pd.Series) -> bool:
    """Fast exit for numeric ids: a sort finds 'no repeats' quicker than hashing."""
    if not pd.api.types.is_numeric_dtype(ids):
        return not ids.is_unique
    values = ids.to_numpy(dtype=float, na_value=np.nan)
    values = values[~np.isnan(values)]
    if bool((values[1:] > values[:-1]).all()):  # ids in increasing order: the usual export
        return False
    values = np.sort(values)
    return bool((values[1:] == values[:-1]).any())


def _unit_hints(time: np.ndarray, roles: Roles) -> list[str]:
    """Heuristic hints (rules of thumb) that the duration column is in another unit."""
    unit = roles.duration_unit
    raw = convert_time(time, roles.unit, unit)
    top = float(np.nanmax(raw)) if len(raw) else 0.0
    # The first rows usually settle it; the full column is scanned only when they are whole.
    whole = bool(np.all(np.mod(raw[:10_000], 1) == 0)) and bool(np.all(np.mod(raw, 1) == 0))
    if unit == "days" and whole and top < 120:
        return [
            f"All times are whole numbers below 120 (largest {top:g}); if they are weeks or "
            "months rather than days, set the unit of the time column."
        ]
    if unit == "days" and not whole and top <= 40:
        return [
            f"Times are fractional and at most {top:g}; if they are years or months rather "
            "than days, set the unit of the time column."
        ]
    if unit == "years" and top > 100:
        return [
            f"Times reach {top:g} years; if they are days or months, set the unit of the "
            "time column."
        ]
    return []
