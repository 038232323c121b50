"""Delayed entry (left truncation): risk sets in Kaplan–Meier, Cox and cumulative incidence.

Convention shared by the engine: a subject is at risk at t when entry < t <= time.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from lifelines import CoxPHFitter, KaplanMeierFitter
from numpy.testing import assert_allclose

from engine.competing.incidence import aalen_johansen
from engine.cox.fit import fit_cox
from engine.survival.curves import curves_by_group, kaplan_meier, survival_at
from engine.survival.landmark import landmark
from engine.survival.summary import curves_json, numbers_at_risk_frame

# A enters at 0 and dies at 3; B enters at 0, dies at 6; C enters at 5, dies at 8; D enters at 0,
# censored at 10; E enters at 3 (the moment A dies), dies at 9.
HAND = pd.DataFrame(
    {
        "_entry": [0.0, 0.0, 5.0, 0.0, 3.0],
        "_time": [3.0, 6.0, 8.0, 10.0, 9.0],
        "_event": [1, 1, 1, 0, 1],
        "x": [1.0, 0.0, 1.0, 0.0, 2.0],
    }
)


def test_kaplan_meier_risk_sets_by_hand():
    curve = kaplan_meier(HAND["_time"], HAND["_event"], entry=HAND["_entry"])
    at_risk = dict(zip(curve.time.tolist(), curve.at_risk.tolist(), strict=True))
    # At 3: A, B, D. C has not entered (enters at 5); E enters at 3, so is not at risk at 3.
    assert at_risk[3.0] == 3
    # At 6: B, C (entered at 5), D, E. At 8: C, D, E. At 9: D, E. At 10: D.
    assert at_risk[6.0] == 4 and at_risk[8.0] == 3 and at_risk[9.0] == 2 and at_risk[10.0] == 1
    surv = dict(zip(curve.time.tolist(), curve.survival.tolist(), strict=True))
    assert_allclose(surv[3.0], 2 / 3)
    assert_allclose(surv[6.0], 2 / 3 * 3 / 4)
    assert_allclose(surv[8.0], 2 / 3 * 3 / 4 * 2 / 3)
    assert_allclose(surv[9.0], 2 / 3 * 3 / 4 * 2 / 3 * 1 / 2)
    # Ignoring entry, everyone counts as at risk from 0: 5 at time 3.
    naive = kaplan_meier(HAND["_time"], HAND["_event"])
    assert naive.at_risk[naive.time == 3.0][0] == 5


def test_kaplan_meier_with_entry_matches_lifelines(rng):
    n = 300
    time = rng.exponential(10, n) + 0.5
    entry = time * rng.uniform(0, 0.8, n)  # continuous: never equal to an observed time
    event = rng.integers(0, 2, n)
    curve = kaplan_meier(time, event, entry=entry)
    ref = KaplanMeierFitter().fit(time, event, entry=entry)
    assert_allclose(curve.survival, ref.survival_function_at_times(curve.time).to_numpy())


def _partial_loglik_by_hand(frame: pd.DataFrame, beta: float) -> float:
    """Breslow partial log-likelihood with risk sets {j: entry_j < t_i <= time_j} (no ties)."""
    total = 0.0
    for i in np.flatnonzero(frame["_event"].to_numpy() == 1):
        t = frame["_time"].iloc[i]
        risk = (frame["_entry"] < t) & (frame["_time"] >= t)
        total += beta * frame["x"].iloc[i] - np.log(np.exp(beta * frame["x"][risk]).sum())
    return float(total)


def test_cox_uses_truncated_risk_sets():
    result = fit_cox(HAND, ["x"], entry="_entry", ties="breslow", without_each=False)
    beta = result.terms[0].coef
    assert_allclose(result.loglik, _partial_loglik_by_hand(HAND, beta), rtol=1e-10)
    # The maximiser of the hand-computed likelihood: the derivative vanishes at beta.
    step = 1e-5
    slope = (
        _partial_loglik_by_hand(HAND, beta + step) - _partial_loglik_by_hand(HAND, beta - step)
    ) / (2 * step)
    assert abs(slope) < 1e-5
    without = fit_cox(HAND.drop(columns="_entry"), ["x"], ties="breslow", without_each=False)
    assert abs(without.terms[0].coef - beta) > 1e-3  # entry changes the risk sets, hence beta


def test_cox_with_entry_matches_lifelines(rng):
    n = 400
    x = rng.normal(0, 1, n)
    time = rng.exponential(8 * np.exp(-0.5 * x)) + 0.2
    entry = time * rng.uniform(0, 0.7, n)
    event = (rng.uniform(size=n) < 0.8).astype(int)
    frame = pd.DataFrame({"_time": time, "_event": event, "_entry": entry, "x": x})
    ours = fit_cox(frame, ["x"], entry="_entry", without_each=False)
    ref = CoxPHFitter().fit(frame, "_time", "_event", entry_col="_entry")
    assert_allclose(ours.terms[0].coef, ref.params_["x"], rtol=1e-6)
    assert_allclose(ours.terms[0].se, ref.standard_errors_["x"], rtol=1e-5)


def test_cumulative_incidence_with_one_cause_equals_one_minus_km_with_entry():
    cause = np.where(HAND["_event"] == 1, "event", None)
    table = aalen_johansen(HAND["_time"], cause, entry=HAND["_entry"]).table
    curve = kaplan_meier(HAND["_time"], HAND["_event"], entry=HAND["_entry"])
    mine = table.set_index("time").loc[curve.time]
    assert_allclose(mine["cumulative_incidence"], 1 - curve.survival, atol=1e-14)
    assert_allclose(mine["n_at_risk"], curve.at_risk)


def test_landmark_on_original_scale_gives_conditional_km(rng):
    # Landmark frames on the original time scale carry _entry = L, which the curves honour.
    n = 200
    frame = pd.DataFrame({"_time": np.ceil(rng.exponential(8, n)), "_event": rng.integers(0, 2, n)})
    at = 4.0
    kept = landmark(frame, at, time_from_landmark=False).frame
    after = curves_by_group(kept).curves[0]
    full = kaplan_meier(frame["_time"], frame["_event"])
    s_at = full.survival[np.searchsorted(full.time, at, side="right") - 1]
    expected = full.survival[full.time > at] / s_at
    assert_allclose(after.survival, expected, atol=1e-12)


def test_survival_at_counts_at_risk_as_entry_before_t_and_time_from_t(rng):
    """Issue 10 item 9: with an entry time, ``at_risk`` at t counts entry < t <= time (the risk
    set's definition), also at times between observed times where someone enters; the same
    count as the numbers-at-risk table under the figure (an exact property)."""
    n = 300
    entry = rng.uniform(0, 5, n).round(1)
    time = entry + rng.exponential(5, n).round(1) + 0.1
    event = rng.integers(0, 2, n)
    group = rng.choice(["a", "b"], n)
    ticks = np.unique(np.r_[np.arange(0.0, 12, 0.37), entry[:25], time[:25]])
    direct = [int(((entry < t) & (t <= time)).sum()) for t in ticks]
    curve = kaplan_meier(time, event, entry=entry)
    assert survival_at(curve, ticks).frame["at_risk"].tolist() == direct
    frame = pd.DataFrame({"_time": time, "_event": event, "_entry": entry, "_group": group})
    table = numbers_at_risk_frame(frame, ticks).frame
    for curve in curves_by_group(frame).curves[1:]:
        rows = table[table["group"] == curve.label]
        assert survival_at(curve, ticks).frame["at_risk"].tolist() == rows["at_risk"].tolist()
    json_curve = curves_json(frame, times=ticks[:5])[0]
    assert [p["at_risk"] for p in json_curve["at_times"]] == direct[:5]
