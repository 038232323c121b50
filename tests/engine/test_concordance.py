"""Harrell's C: checked against a direct O(n^2) pair count written here, against
lifelines.utils.concordance_index, and its standard error against a leave-one-out jackknife."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines.datasets import load_rossi
from lifelines.utils import concordance_index

from engine.cox.concordance import harrell_c, pair_counts
from engine.cox.fit import fit_cox
from engine.errors import AnalysisError


def direct_counts(time, event, risk, strata=None, entry=None):
    """Every ordered pair checked by hand: i comparable with j when i had the event and j was
    followed longer, or as long without the event (and, with entry times, j had entered before
    i's event: entry_j < t_i); concordant when i has the higher risk."""
    n = len(time)
    strata = np.zeros(n) if strata is None else np.asarray(strata)
    entry = np.full(n, -np.inf) if entry is None else np.asarray(entry)
    conc = np.zeros(n)
    comp = np.zeros(n)
    for i in range(n):
        for j in range(n):
            if i == j or strata[i] != strata[j] or not event[i] or entry[j] >= time[i]:
                continue
            if time[j] > time[i] or (time[j] == time[i] and not event[j]):
                credit = 1.0 if risk[i] > risk[j] else 0.5 if risk[i] == risk[j] else 0.0
                for k in (i, j):
                    comp[k] += 1
                    conc[k] += credit
    return conc, comp


def tied_sample(rng, n):
    time = rng.integers(1, 12, n).astype(float)
    event = rng.random(n) < 0.6
    risk = rng.integers(0, 5, n).astype(float)
    return time, event, risk


@pytest.mark.parametrize("seed", [1, 2, 3, 4])
def test_matches_direct_count_with_tied_times_and_scores(seed):
    time, event, risk = tied_sample(np.random.default_rng(seed), 80)
    conc, comp = direct_counts(time, event, risk)
    mine_conc, mine_comp, _ = pair_counts(time, event, risk)
    np.testing.assert_allclose(mine_conc, conc)
    np.testing.assert_allclose(mine_comp, comp)
    result = harrell_c(time, event, risk)
    assert result.concordance == pytest.approx(conc.sum() / comp.sum(), rel=1e-12)
    assert result.comparable == comp.sum() / 2


def test_matches_direct_count_with_distinct_scores(rng):
    time, event, _ = tied_sample(rng, 80)
    risk = rng.normal(size=80)  # no tied scores: the fast path
    conc, comp = direct_counts(time, event, risk)
    mine_conc, mine_comp, tied = pair_counts(time, event, risk)
    np.testing.assert_allclose(mine_conc, conc)
    np.testing.assert_allclose(mine_comp, comp)
    assert tied == 0


@pytest.mark.parametrize("seed", [5, 6])
def test_matches_lifelines_concordance_index(seed):
    # lifelines scores "higher = survives longer": pass the negated risk.
    time, event, risk = tied_sample(np.random.default_rng(seed), 300)
    expected = concordance_index(time, -risk, event)
    assert harrell_c(time, event, risk).concordance == pytest.approx(expected, rel=1e-12)


def test_strata_compare_only_within_a_stratum(rng):
    time, event, risk = tied_sample(rng, 90)
    strata = rng.integers(0, 3, 90)
    conc, comp = direct_counts(time, event, risk, strata)
    result = harrell_c(time, event, risk, strata)
    assert result.concordance == pytest.approx(conc.sum() / comp.sum(), rel=1e-12)


def test_counts_add_up(rng):
    time, event, risk = tied_sample(rng, 200)
    r = harrell_c(time, event, risk)
    assert r.concordant + r.discordant + r.tied_score == pytest.approx(r.comparable)
    assert r.concordance == pytest.approx((r.concordant + r.tied_score / 2) / r.comparable)


def test_standard_error_close_to_leave_one_out_jackknife(rng):
    # The delta-method error approximates the jackknife one (both first-order); loose tolerance.
    n = 150
    time = rng.exponential(size=n)
    risk = time * -1 + rng.normal(scale=1.0, size=n)
    event = rng.random(n) < 0.7
    estimate = harrell_c(time, event, risk)
    keep = ~np.eye(n, dtype=bool)
    leave_out = np.array([harrell_c(time[k], event[k], risk[k]).concordance for k in keep])
    jackknife = np.sqrt((n - 1) / n * np.sum((leave_out - leave_out.mean()) ** 2))
    assert estimate.standard_error == pytest.approx(jackknife, rel=0.05)


def test_rossi_concordance_and_error():
    # Rossi et al. (1980) data, Efron fit of the seven covariates: lifelines gives the same C;
    # C = 0.64 (se = 0.027) as printed by R's coxph in Fox & Weisberg (2018) (from memory).
    rossi = load_rossi()
    covariates = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]
    result = fit_cox(rossi.rename(columns={"week": "_time", "arrest": "_event"}), covariates)
    from lifelines import CoxPHFitter

    reference = CoxPHFitter().fit(rossi, "week", "arrest").concordance_index_
    assert result.concordance.concordance == pytest.approx(reference, rel=1e-10)
    assert result.concordance.standard_error == pytest.approx(0.027, abs=0.0005)


def test_no_comparable_pair_is_an_error():
    with pytest.raises(AnalysisError, match="comparable pair"):
        harrell_c([1.0, 2.0], [0, 0], [0.1, 0.2])


@pytest.mark.parametrize("seed", [5, 6, 7])
def test_entry_times_compare_only_rows_at_risk_at_the_event(seed):
    """Issue 13: with delayed entry a row is compared with an event only while at risk there
    (entry < t <= time), checked pair by pair, with ties in times, entries and scores."""
    rng = np.random.default_rng(seed)
    time, event, risk = tied_sample(rng, 90)
    entry = np.minimum(rng.integers(0, 8, 90).astype(float), time - 1)
    strata = rng.integers(0, 2, 90)
    for chosen in (None, strata):
        conc, comp = direct_counts(time, event, risk, chosen, entry)
        result = harrell_c(time, event, risk, chosen, entry=entry)
        assert result.concordance == pytest.approx(conc.sum() / comp.sum(), rel=1e-12)
        assert result.comparable == comp.sum() / 2
        tied = sum(
            1
            for i in range(90)
            for j in range(90)
            if event[i]
            and i != j
            and (chosen is None or chosen[i] == chosen[j])
            and entry[j] < time[i]
            and (time[j] > time[i] or (time[j] == time[i] and not event[j]))
            and risk[i] == risk[j]
        )
        assert result.tied_score == tied


def test_splitting_follow_up_into_episodes_leaves_c_and_its_error_unchanged():
    """An exact property: a subject's follow-up cut into (0, c] censored and (c, T] with the same
    score is at risk at the same event times, so C, its pairs and (summed by subject) its
    standard error do not move. Counting episodes as subjects, without their entry times,
    changes C."""
    rng = np.random.default_rng(11)
    n = 120
    time = rng.exponential(10, n).round(1) + 0.2
    event = rng.random(n) < 0.6
    risk = rng.normal(size=n).round(1)
    whole = harrell_c(time, event, risk)
    ids, entries, exits, events, scores = [], [], [], [], []
    for i in range(n):
        cuts = np.sort(rng.uniform(0.1, time[i], rng.integers(0, 3)).round(2))
        cuts = cuts[(cuts > 0) & (cuts < time[i])]
        bounds = np.unique(np.r_[0.0, cuts, time[i]])
        for k in range(len(bounds) - 1):
            ids.append(i)
            entries.append(bounds[k])
            exits.append(bounds[k + 1])
            events.append(bool(event[i]) and k == len(bounds) - 2)
            scores.append(risk[i])
    assert len(ids) > n + 40
    split = harrell_c(exits, events, scores, entry=entries, clusters=ids)
    assert split.concordance == pytest.approx(whole.concordance, rel=1e-12)
    assert split.comparable == whole.comparable and split.tied_score == whole.tied_score
    assert split.standard_error == pytest.approx(whole.standard_error, rel=1e-12)
    assert harrell_c(exits, events, scores).comparable != whole.comparable


def test_cox_concordance_on_episodes_equals_the_unsplit_fit():
    from engine.prepare.episodes import fit_split

    rng = np.random.default_rng(3)
    n = 150
    frame = pd.DataFrame(
        {
            "_time": rng.exponential(10, n).round(1) + 0.2,
            "_event": (rng.random(n) < 0.7).astype(int),
            "age": rng.normal(60, 8, n).round(0),
        }
    )
    whole = fit_cox(frame, ["age"])
    split = fit_split(frame, ["age"], [3.0, 8.0]).result
    assert split.n > n
    assert split.concordance.concordance == pytest.approx(whole.concordance.concordance, rel=1e-9)
