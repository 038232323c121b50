"""Harrell's concordance index in O(n log n), with a standard error.

A pair is comparable when the subject with the shorter time had the event; at a tied time, an
event and a censored subject form a comparable pair (the censored one outlived the event) while
two events do not. The pair is concordant when the earlier subject has the higher risk score and
counts one half when the scores are tied. With strata, only pairs within a stratum are compared.

The pairs are counted by a bottom-up merge over the bits of the time rank: at level k the rows
are grouped into blocks sharing the time-rank bits above k, and the two halves of each block
(bit k = 0, the earlier times; bit k = 1, the later ones) are compared after sorting by score.
Every comparable pair is split at exactly one level, so each level costs one near-linear sort.

The standard error is the delta-method (infinitesimal jackknife) approximation for a ratio of
two U-statistics: with c_i the concordant-pair count and p_i the comparable-pair count each
subject takes part in, var(C) = sum_i (c_i - C p_i)^2 / N^2, N the number of comparable pairs.

With entry times (delayed entry, or episodes of (entry, time]), a row is compared with an event
at t only while it is at risk there, entry < t <= time: the pairs whose later row had not yet
entered (entry >= t) are counted by the same merge, with a "not yet entered" copy of each such row
at its entry time, and taken away. Splitting a subject's follow-up into episodes with the same
score then leaves C unchanged. With ``clusters`` (the subject of each row) the standard error
sums each subject's counts over its rows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.errors import AnalysisError
from engine.json_values import json_float


@dataclass(frozen=True)
class ConcordanceResult:
    concordance: float
    standard_error: float
    concordant: float  # pairs, ties in score counted separately below
    discordant: float
    tied_score: float
    comparable: float

    def to_dict(self) -> dict:
        return {
            "concordance": json_float(self.concordance),
            "standard_error": json_float(self.standard_error),
            "concordant_pairs": float(self.concordant),
            "discordant_pairs": float(self.discordant),
            "tied_score_pairs": float(self.tied_score),
            "comparable_pairs": float(self.comparable),
        }

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([self.to_dict()])


def pair_counts(
    time, event, risk, strata=None, *, earlier_only: bool = False
) -> tuple[np.ndarray, np.ndarray, float]:
    """Per subject: concordant pairs (half for tied scores) and comparable pairs; and the total
    number of pairs with tied scores. With ``earlier_only`` a pair counts only for its earlier
    member (the one with the event), as censoring-weighted concordance needs."""
    time = np.asarray(time, dtype=float)
    event = np.asarray(event).astype(bool)
    risk = np.asarray(risk, dtype=float)
    n = len(time)
    concordant = np.zeros(n)
    comparable = np.zeros(n)
    if n < 2:
        return concordant, comparable, 0.0
    time_rank = np.unique(time, return_inverse=True)[1].astype(np.int64)
    time_key = 2 * time_rank + (~event)  # at a tied time the event comes first
    score = np.unique(risk, return_inverse=True)[1].astype(np.int64)
    n_scores = int(score.max()) + 1
    stratum = (
        np.zeros(n, dtype=np.int64)
        if strata is None
        else np.unique(np.asarray(strata), return_inverse=True)[1].astype(np.int64)
    )
    bits = max(1, int(time_key.max()).bit_length())
    full_key = (stratum << bits) + time_key  # shifting it right by k+1 gives the level-k block
    order = np.lexsort((score, full_key))
    full_key, score, event = full_key[order], score[order], event[order]
    conc = np.zeros(n)
    comp = np.zeros(n)
    tied_pairs = 0.0
    for level in range(bits):
        block = full_key >> (level + 1)
        new_block = np.empty(n, dtype=bool)
        new_block[0] = True
        np.not_equal(block[1:], block[:-1], out=new_block[1:])
        block_id = np.cumsum(new_block) - 1
        # The current order holds each half-block sorted by score: this stable sort is a merge.
        perm = np.argsort(block_id * n_scores + score, kind="stable")
        full_key, score, event, conc, comp, order = (
            a[perm] for a in (full_key, score, event, conc, comp, order)
        )
        later = ((full_key >> level) & 1).astype(bool)
        if n_scores == n:
            _count_level_distinct(new_block, later, event, conc, comp, earlier_only)
        else:
            tied_pairs += _count_level(new_block, score, later, event, conc, comp, earlier_only)
    concordant[order] = conc
    comparable[order] = comp
    return concordant, comparable, tied_pairs


def _count_level_distinct(new_block, later, event, conc, comp, earlier_only=False) -> None:
    """``_count_level`` when no two scores are equal (every run is a single row)."""
    block_start = np.flatnonzero(new_block)
    block_len = np.diff(np.append(block_start, len(later)))
    later_f = later.astype(float)
    early_f = (~later & event).astype(float)
    later_before = np.concatenate([[0.0], np.cumsum(later_f)])
    early_before = np.concatenate([[0.0], np.cumsum(early_f)])
    block_end = block_start + block_len
    later_below = later_before[:-1] - np.repeat(later_before[block_start], block_len)
    early_below = early_before[:-1] - np.repeat(early_before[block_start], block_len)
    later_in_block = np.repeat(later_before[block_end] - later_before[block_start], block_len)
    early_in_block = np.repeat(early_before[block_end] - early_before[block_start], block_len)
    conc += early_f * later_below
    comp += early_f * later_in_block
    if not earlier_only:
        conc += later_f * (early_in_block - early_below)
        comp += later_f * early_in_block


def _count_level(new_block, score, later, event, conc, comp, earlier_only=False) -> float:
    """Add this level's pairs to the per-row counts (rows sorted by block, then score)."""
    new_run = new_block.copy()
    new_run[1:] |= score[1:] != score[:-1]
    block_start = np.flatnonzero(new_block)
    run_start = np.flatnonzero(new_run)
    block_len = np.diff(np.append(block_start, len(score)))
    run_len = np.diff(np.append(run_start, len(score)))
    run_block_start = np.repeat(block_start, np.add.reduceat(new_run.astype(np.int64), block_start))

    later_f = later.astype(float)
    early_f = (~later & event).astype(float)
    later_before = np.concatenate([[0.0], np.cumsum(later_f)])
    early_before = np.concatenate([[0.0], np.cumsum(early_f)])
    run_end = run_start + run_len
    later_below = np.repeat(later_before[run_start] - later_before[run_block_start], run_len)
    early_below = np.repeat(early_before[run_start] - early_before[run_block_start], run_len)
    later_in_run = np.repeat(later_before[run_end] - later_before[run_start], run_len)
    early_in_run = np.repeat(early_before[run_end] - early_before[run_start], run_len)
    block_end = block_start + block_len
    later_in_block = np.repeat(later_before[block_end] - later_before[block_start], block_len)
    early_in_block = np.repeat(early_before[block_end] - early_before[block_start], block_len)

    # An earlier event is concordant with later subjects of lower score; a later subject with
    # earlier events of higher score; tied scores count one half.
    conc += early_f * (later_below + 0.5 * later_in_run)
    comp += early_f * later_in_block
    if not earlier_only:
        conc += later_f * (early_in_block - early_below - 0.5 * early_in_run)
        comp += later_f * early_in_block
    return float(np.dot(early_f, later_in_run))


def _not_yet_entered_pairs(time, event, risk, strata, entry):
    """Per row, the concordant (half for tied scores) and comparable pairs of ``pair_counts``
    whose later row had not entered at the event time (entry >= t), and their tied-score
    pairs: the difference between counting the events with and without a copy of each late
    row placed, censored, at its entry time."""
    time = np.asarray(time, dtype=float)
    event = np.asarray(event).astype(bool)
    risk = np.asarray(risk, dtype=float)
    entry = np.asarray(entry, dtype=float)
    n = len(time)
    events = np.flatnonzero(event)
    late = np.flatnonzero(entry >= time[events].min()) if len(events) else np.array([], int)
    conc = np.zeros(n)
    comp = np.zeros(n)
    if len(events) == 0 or len(late) == 0:
        return conc, comp, 0.0
    rows = np.concatenate([events, late])
    mixed_time = np.concatenate([time[events], entry[late]])
    mixed_event = np.r_[np.ones(len(events), bool), np.zeros(len(late), bool)]
    mixed_strata = None if strata is None else np.asarray(strata)[rows]
    with_late = pair_counts(mixed_time, mixed_event, risk[rows], mixed_strata)
    alone = pair_counts(
        time[events],
        np.ones(len(events), bool),
        risk[events],
        None if strata is None else np.asarray(strata)[events],
    )
    k = len(events)
    np.add.at(conc, events, with_late[0][:k] - alone[0])
    np.add.at(comp, events, with_late[1][:k] - alone[1])
    np.add.at(conc, late, with_late[0][k:])
    np.add.at(comp, late, with_late[1][k:])
    return conc, comp, with_late[2] - alone[2]


def harrell_c(time, event, risk, strata=None, entry=None, clusters=None) -> ConcordanceResult:
    """Harrell's C for a risk score (higher score = expected to fail sooner); ``entry`` the
    rows' entry times, ``clusters`` the subject of each row (see the module's note)."""
    concordant_i, comparable_i, tied_pairs = pair_counts(time, event, risk, strata)
    if entry is not None:
        late_conc, late_comp, late_tied = _not_yet_entered_pairs(time, event, risk, strata, entry)
        concordant_i = concordant_i - late_conc
        comparable_i = comparable_i - late_comp
        tied_pairs -= late_tied
    if clusters is not None:
        codes = np.unique(np.asarray(clusters), return_inverse=True)[1]
        concordant_i = np.bincount(codes, concordant_i)
        comparable_i = np.bincount(codes, comparable_i)
    pairs = comparable_i.sum() / 2
    if pairs == 0:
        raise AnalysisError(
            "Harrell's concordance needs at least one comparable pair (a subject with an event "
            "and another followed for longer); this data has none. Check the event column."
        )
    concordant_pairs = concordant_i.sum() / 2
    c = concordant_pairs / pairs
    se = float(np.sqrt(np.sum((concordant_i - c * comparable_i) ** 2)) / pairs)
    return concordance_result(concordant_pairs, pairs, tied_pairs, se)


def concordance_result(concordant_pairs, pairs, tied_pairs, se) -> ConcordanceResult:
    """The result from the pair totals (``concordant_pairs`` counting tied scores one half)."""
    strict = concordant_pairs - tied_pairs / 2
    return ConcordanceResult(
        concordance=float(concordant_pairs / pairs),
        standard_error=float(se),
        concordant=float(strict),
        discordant=float(pairs - strict - tied_pairs),
        tied_score=float(tied_pairs),
        comparable=float(pairs),
    )
