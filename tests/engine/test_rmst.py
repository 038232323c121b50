"""Restricted mean survival time.

References: lifelines `restricted_mean_survival_time` (the estimate), the Greenwood covariance
of the Kaplan–Meier curve integrated directly (the variance), and exact properties with
hypothesis (no censoring).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from lifelines import KaplanMeierFitter
from lifelines.utils import restricted_mean_survival_time
from numpy.testing import assert_allclose
from scipy.stats import norm

from engine.errors import AnalysisError
from engine.survival.curves import kaplan_meier
from engine.survival.rmst import rmst, rmst_by_group, rmst_contrast, rmst_frame, rmst_from_curve


def _arrays(frame, group=None):
    rows = frame if group is None else frame[frame["_group"] == group]
    return rows["_time"].to_numpy(), rows["_event"].to_numpy()


@pytest.mark.parametrize("tau", [3.0, 6.5, 11.0])
@pytest.mark.parametrize("group", ["g0", "g3"])
def test_rmst_estimate_matches_lifelines(simulated, group, tau):
    time, event = _arrays(simulated, group)
    fitter = KaplanMeierFitter().fit(time, event)
    assert_allclose(rmst(time, event, tau=tau).estimate, restricted_mean_survival_time(fitter, tau))


@pytest.mark.parametrize("tau", [4.0, 9.5, 12.0])
def test_variance_equals_the_integrated_greenwood_covariance(simulated, tau):
    # Var(∫₀^τ Ŝ) = ∫∫ Cov(Ŝ(s), Ŝ(t)) ds dt with Greenwood's Cov = Ŝ(s) Ŝ(t) V(min(s, t)),
    # summed exactly over the pieces of the step function (a different route to the formula).
    time, event = _arrays(simulated, "g1")
    curve = kaplan_meier(time, event)
    inside = curve.time < tau
    edges = np.concatenate(([0.0], curve.time[inside], [tau]))
    s = np.concatenate(([1.0], curve.survival[inside]))
    v = np.concatenate(([0.0], curve.greenwood[inside]))
    width = np.diff(edges)
    piece = s * width
    index = np.arange(len(s))
    cov = np.outer(piece, piece) * v[np.minimum.outer(index, index)]
    assert_allclose(rmst_from_curve(curve, tau).std_err, np.sqrt(cov.sum()), rtol=1e-9)


uncensored = st.lists(st.integers(1, 40), min_size=2, max_size=60)


@settings(max_examples=150, deadline=None)
@given(uncensored, st.floats(0.5, 40.0))
def test_without_censoring_rmst_is_the_mean_of_truncated_times(values, tau):
    time = np.array(values, float)
    tau = min(tau, float(time.max()))
    result = rmst(time, np.ones_like(time), tau=tau)
    truncated = np.minimum(time, tau)
    assert_allclose(result.estimate, truncated.mean(), rtol=1e-12)
    # and the Greenwood-type variance reduces to the plug-in variance of that mean
    assert_allclose(result.std_err, np.sqrt(truncated.var() / len(time)), rtol=1e-9, atol=1e-12)


def test_default_tau_is_the_smallest_largest_time_and_is_stated(freireich):
    table = rmst_by_group(*_arrays(freireich), freireich["_group"])
    assert table.tau == 23.0  # placebo's largest time; 6-MP runs to 35
    assert "smallest of the groups' largest observed times" in table.tau_rule
    assert [e.label for e in table.estimates] == ["6-MP", "placebo"]
    json.dumps(table.to_dict(), allow_nan=False)


def test_tau_beyond_a_group_is_refused_naming_the_group(simulated):
    time, event = _arrays(simulated)
    group = np.where(simulated["_group"] == "g0", "short", "long")
    time = np.where((group == "short") & (time > 8), 8.0, time)
    event = np.where(group == "short", 0, event)  # the short group's curve never reaches 0
    with pytest.raises(AnalysisError, match="short"):
        rmst_by_group(time, event, group, tau=10.0)


def test_contrast_is_b_minus_a_with_consistent_interval_and_p_value(freireich):
    table = rmst_by_group(*_arrays(freireich), freireich["_group"], confidence=0.9)
    a, b = table.estimates
    contrast = table.contrast
    assert contrast.group_a == "6-MP" and contrast.group_b == "placebo"
    assert_allclose(contrast.difference, b.estimate - a.estimate)
    assert_allclose(contrast.difference_se, np.hypot(a.std_err, b.std_err))
    z = norm.ppf(0.95)
    assert_allclose(contrast.difference_upper - contrast.difference, z * contrast.difference_se)
    assert_allclose(
        contrast.difference_p, 2 * norm.sf(abs(contrast.difference) / contrast.difference_se)
    )
    assert_allclose(contrast.ratio, b.estimate / a.estimate)
    # an interval excluding the null value goes with p below 1 - confidence, and vice versa
    assert (contrast.ratio_upper < 1) == (contrast.ratio_p < 0.1)
    assert rmst_contrast(a, b).to_dict() == contrast.to_dict()


def test_rmst_frame_puts_all_rows_first(freireich):
    table = rmst_frame(freireich, tau=20.0)
    assert [e.label for e in table.estimates] == [None, "6-MP", "placebo"]
    assert table.tau_rule == "chosen by the user" and table.tau == 20


def test_rmst_frame_keeps_rows_without_group_in_the_first_row_only(freireich):
    freireich.loc[[0], "_group"] = np.nan
    table = rmst_frame(freireich, tau=20.0)
    everyone = rmst(freireich["_time"], freireich["_event"], tau=20.0)
    assert_allclose(table.estimates[0].estimate, everyone.estimate)
    rest = freireich.dropna(subset=["_group"])
    six_mp = rmst(*_arrays(rest, "6-MP"), tau=20.0)
    assert_allclose(table.estimates[1].estimate, six_mp.estimate)
    assert table.contrast.group_a == "6-MP"


def _delayed_entry_file(path):
    import pandas as pd

    rng = np.random.default_rng(4)
    n = 80
    entry = rng.uniform(2, 6, n).round(1)
    frame = pd.DataFrame(
        {
            "t": (entry + rng.exponential(10, n)).round(1),
            "e": rng.integers(0, 2, n),
            "entry": entry,
            "g": rng.choice(["a", "b"], n),
        }
    )
    frame.to_csv(path, index=False)
    return frame


@pytest.mark.parametrize("backend", ["memory", "duckdb"])
def test_rmst_with_delayed_entry_states_its_origin_and_offers_the_first_entry(
    tmp_path, backend, capsys
):
    """From the first entry the restricted mean equals lifelines' area under its delayed-entry
    Kaplan–Meier curve (lifelines' timeline starts at the first entry); from time 0 (the
    default, S = 1 before the first entry) it is that area plus the first entry, with the same
    standard error. Both say which origin they used, in the JSON and the text (memory and
    DuckDB alike)."""
    from app.cli import main

    path = tmp_path / "entry.csv"
    frame = _delayed_entry_file(path)
    first = float(frame["entry"].min())
    out = tmp_path / "r.json"
    args = ["analyze", str(path), "--time", "t", "--event", "e", "--entry", "entry"]
    args += ["--group", "g", "--rmst-horizon", "10", "--backend", backend, "--json", str(out)]
    results = {}
    for origin in ("zero", "first-entry"):
        assert main([*args, "--rmst-origin", origin]) == 0
        text = capsys.readouterr().out
        results[origin] = [c["rmst"] for c in json.loads(out.read_text())["curves"]]
        note = results[origin][0]["origin_rule"]
        assert f"first entry (time {first:g})" in note and f"Note: {note}" in text
    zero, entry = results["zero"], results["first-entry"]
    fitter = KaplanMeierFitter().fit(frame["t"], frame["e"], entry=frame["entry"])
    assert zero[0]["origin"] == 0.0 and entry[0]["origin"] == first
    assert_allclose(entry[0]["estimate"], restricted_mean_survival_time(fitter, 10.0), rtol=1e-9)
    for a, b in zip(zero, entry, strict=True):
        assert_allclose(b["estimate"], a["estimate"] - first, rtol=1e-12)
        assert_allclose(b["std_err"], a["std_err"], rtol=1e-12)
    assert "another common convention starts at the first entry" in zero[0]["origin_rule"]


def test_rmst_without_delayed_entry_has_no_origin_note():
    curve = kaplan_meier(np.array([1.0, 2, 3, 4]), np.array([1, 0, 1, 1]))
    from engine.survival.rmst import rmst_origin

    assert rmst_origin(curve, "first_entry") == (0.0, None)
    assert rmst_by_group(np.array([1.0, 2, 3, 4]), np.ones(4), tau=3.0).origin_rule is None
