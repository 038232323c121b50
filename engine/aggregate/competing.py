"""The "competing" section from counts: Aalen–Johansen incidence, Gray's test and the
cause-specific Cox models, with the row-level code of ``engine.competing.incidence`` and
``engine.competing.gray_test`` fed the per-time counts a database gives.

The incidence and Gray's test depend on the rows only through, per group (and stratum), the rows
at risk, leaving and having each cause at every distinct time: ``counts.risk_table`` gives the
first two (with delayed entry), ``CountTable.cause_exits`` the third. A cause-specific Cox model
is the ordinary Cox model with the other causes as censored, fitted from per-time sums.
The Fine–Gray model needs each row's censoring weight over the rows still "at risk" after a
competing event, which per-time sums of the covariates do not give; it is not computed.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from scipy.stats import norm

from engine.aggregate.analysis import SAMPLE_HINT
from engine.aggregate.counts import CountTable, risk_table, stratum_codes
from engine.aggregate.sql import literal
from engine.aggregate.sql_checks import AggregatedData
from engine.analysis.extra import incidence_section
from engine.competing.gray_test import GrayTest, gray_result, stratum_scores
from engine.competing.incidence import (
    CumulativeIncidence,
    incidence_result,
    incidence_table,
    no_events_error,
)
from engine.errors import AnalysisError

FINE_GRAY_NOT_COMPUTED = (
    "The Fine–Gray model weights each row that had a competing event by the censoring "
    "distribution at every later time, which per-time sums of the covariates do not keep"
    + SAMPLE_HINT
)


def _cause_events(
    counts: CountTable, times, *, groups=None, stratum=None, complete=False
) -> np.ndarray:
    """Events of each cause per (time, column): times x columns x causes, the columns being
    ``groups`` (group codes) or, with None, one column of every row of the selection; with
    ``complete`` only rows with a group and a stratum. Without named causes the event of
    interest is the only cause ("event")."""
    cells = counts.exits.assign(cause=0) if counts.causes is None else counts.cause_exits
    keep = np.ones(len(cells), dtype=bool)
    if stratum is not None:
        keep &= cells["stratum"].to_numpy() == stratum
    if complete:
        keep &= (cells["stratum"].to_numpy() >= 0) & (cells["group"].to_numpy() >= 0)
    k, column = 1, np.zeros(len(cells), dtype=np.int64)
    if groups is not None:
        k = len(groups)
        position = np.full(len(counts.group_labels) + 1, -1, dtype=np.int64)
        position[list(groups)] = np.arange(k)
        column = position[cells["group"].to_numpy()]
        keep &= column >= 0
    cells, column = cells[keep], column[keep]
    n_causes = len(counts.causes or ("event",))
    where = np.searchsorted(times, cells["time"].to_numpy())
    flat = (where * k + column) * n_causes + cells["cause"].to_numpy()
    out = np.bincount(flat, cells["events"].to_numpy().astype(float), len(times) * k * n_causes)
    return np.rint(out).astype(np.int64).reshape(len(times), k, n_causes)


def present_groups(counts: CountTable, *, complete: bool = False) -> list[int]:
    """Group codes with rows (with ``complete``: rows with a stratum as well), in order."""
    ex = counts.exits
    keep = ex["group"] >= 0
    if complete:
        keep &= ex["stratum"] >= 0
    return sorted(int(g) for g in ex.loc[keep, "group"].unique())


def _causes(counts: CountTable) -> tuple[str, ...]:
    causes = counts.causes if counts.causes is not None else ("event",)
    if not causes or (counts.causes is None and counts.events == 0):
        raise no_events_error()
    return causes


def incidence_from_counts(
    counts: CountTable, *, by_group: bool = True, confidence_level: float = 0.95
) -> CumulativeIncidence:
    """``competing.aalen_johansen`` from the counts: overall, or within each group that has
    rows (rows without a group in none)."""
    if not 0 < confidence_level < 1:
        raise AnalysisError(f"Confidence level must lie in (0, 1); got {confidence_level!r}.")
    causes = _causes(counts)
    z = float(norm.ppf(0.5 + confidence_level / 2))
    split = by_group and counts.group_labels is not None
    parts = [(None, None)]
    if split:
        parts = [(str(counts.group_labels[g]), (g,)) for g in present_groups(counts)]
    pieces, entries = [], []
    for label, groups in parts:
        table = risk_table(counts, by_group=False, groups=groups)
        by_cause = _cause_events(counts, table.times, groups=groups)[:, 0, :]
        removed = table.events[:, 0] + table.censored[:, 0]
        arrays = incidence_table(table.times, removed, by_cause, table.at_risk[:, 0], z)
        pieces.append((label, arrays))
        entries.append(None if table.entries is None else table.entries[0])
    delayed = any(e is not None for e in entries)
    return incidence_result(pieces, causes, confidence_level, entries if delayed else None)


def gray_tests_from_counts(counts: CountTable) -> tuple[GrayTest, ...] | None:
    """``gray_test.gray_tests`` from the counts (rows with a group and stratum; stratified,
    delayed entry honoured); None with fewer than two groups, as memory gives."""
    groups = present_groups(counts)
    if counts.group_labels is None or len(groups) < 2:
        return None
    complete = present_groups(counts, complete=True)
    labels = tuple(counts.group_labels[g] for g in complete)
    strata = stratum_codes(counts, complete=True)
    tables = []
    for s in strata:
        table = risk_table(counts, stratum=s, groups=tuple(complete), complete=True)
        events = _cause_events(counts, table.times, groups=complete, stratum=s, complete=True)
        tables.append((table.at_risk.astype(float), events))
    present = np.flatnonzero(sum(e.sum(axis=(0, 1)) for _, e in tables))
    names = _causes(counts)
    out = []
    for j in present:
        parts = []
        for y, events in tables:
            d1 = events[:, :, j].astype(float)
            d2 = events.sum(axis=2) - d1
            parts.append(stratum_scores(y, d1, d2.astype(float)))
        out.append(gray_result(names[j], labels, parts))
    return tuple(out)


def cause_specific_from_data(data: AggregatedData, chosen: Mapping) -> list[dict]:
    """A Cox model per cause on the roles' covariates from per-time sums (other causes
    censored; not stratified, as in memory)."""
    from engine.aggregate.analysis import cox_from_data

    model = {
        "covariates": None,
        "strata": False,
        "reference": None,
        "ties": chosen["ties"],
        "confidence": chosen["confidence"],
        "ph_time_scale": None,
    }
    out = []
    for cause in data.counts.causes:
        event = f"(CASE WHEN _cause = {literal(cause)} THEN 1 ELSE 0 END)"
        result, _, _ = cox_from_data(
            data, model, drop_one=False, event=event, concordance=False, clusters=False
        )
        terms = result.to_dict()["terms"]
        out.append({"cause": cause, "n": result.n, "events": result.events, "terms": terms})
    return out


def competing_from_data(data: AggregatedData, chosen: Mapping) -> dict:
    """The "competing" section of ``analysis_extra.competing_section`` from the database."""
    from engine.analysis.run import computed

    counts, roles = data.counts, data.roles
    result = incidence_from_counts(
        counts, by_group=bool(chosen["by_group"]), confidence_level=chosen["confidence"]
    )
    section = incidence_section(result, chosen["times"])
    if chosen["cause_specific_cox"] and roles.covariates and counts.causes is not None:
        section["cause_specific_cox"] = computed(cause_specific_from_data, data, chosen)
    section["gray_test"] = None
    if chosen.get("gray_test", True) and counts.causes is not None:
        section["gray_test"] = computed(_gray_section, counts)
    section["fine_gray"] = None
    if chosen.get("fine_gray"):
        from engine.analysis.run import not_computed

        section["fine_gray"] = not_computed(FINE_GRAY_NOT_COMPUTED)
    return section


def _gray_section(counts: CountTable) -> list[dict] | None:
    tests = gray_tests_from_counts(counts)
    return None if tests is None else [test.to_dict() for test in tests]
