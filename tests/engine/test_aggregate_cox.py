"""A Cox model from per-(stratum, time) sums equals ``fit_cox`` on the rows, and both equal a
reference library on frequency-weighted data.

Outside references: lifelines' CoxPHFitter with ``weights_col`` and statsmodels' PHReg on the
expanded rows (Efron and Breslow ties).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from engine.aggregate.cox_fit import fit_cox_from_sums
from engine.aggregate.memory import cox_source_from_frame
from engine.cox.diagnostics import TIME_SCALES, proportional_hazards_test
from engine.cox.fit import fit_cox


def model_frame(seed: int, n: int = 500, *, strata=False, entry=False, missing=False):
    rng = np.random.default_rng(seed)
    age = rng.normal(60, 10, n)
    site = rng.choice(["north", "south", "east"], n, p=[0.5, 0.3, 0.2])
    hazard = np.exp(0.03 * (age - 60) + np.where(site == "south", 0.5, 0.0))
    time = np.ceil(rng.exponential(30 / hazard))
    frame = pd.DataFrame(
        {
            "_time": time,
            "_event": (rng.random(n) < 0.7).astype(np.int64),
            "age": age,
            "site": pd.Categorical(site, categories=["north", "south", "east"]),
        }
    )
    if missing:
        frame.loc[rng.random(n) < 0.05, "age"] = np.nan
        frame.loc[rng.random(n) < 0.05, "site"] = np.nan
    if strata:
        frame["_strata"] = pd.Categorical(rng.choice(["a", "b"], n))
    if entry:
        frame["_entry"] = np.floor(time * rng.random(n) * 0.7)
    return frame


CASES = {
    "plain": {},
    "strata": {"strata": True},
    "entry": {"entry": True},
    "everything": {"strata": True, "entry": True, "missing": True},
}


def fits(frame, ties, ph_time_scale="survival"):
    strata = "_strata" if "_strata" in frame else None
    entry = "_entry" if "_entry" in frame else None
    rows = fit_cox(frame, ["age", "site"], strata=strata, entry=entry, ties=ties)
    source, design, concordance = cox_source_from_frame(
        frame, ["age", "site"], strata=strata, entry=entry
    )
    cells, ph = fit_cox_from_sums(
        source, design, ties=ties, concordance=concordance, ph_time_scale=ph_time_scale
    )
    return rows, cells, ph


def numbers(d: dict) -> list[float]:
    """Every number of a JSON object, in order (None as NaN)."""
    out = []
    for value in d.values() if isinstance(d, dict) else d:
        if isinstance(value, dict | list):
            out += numbers(value)
        elif isinstance(value, bool | str) or value is None:
            continue
        else:
            out.append(float(value))
    return out


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_fit_from_sums_equals_row_level(case, ties):
    frame = model_frame(21, **CASES[case])
    rows, cells, _ = fits(frame, ties)
    a, b = rows.to_dict(), cells.to_dict()
    assert [t["variable"] for t in a["terms"]] == [t["variable"] for t in b["terms"]]
    assert a["warnings"] == b["warnings"]
    assert (a["n"], a["events"], a["rows_dropped"]) == (b["n"], b["events"], b["rows_dropped"])
    assert_allclose(numbers(b), numbers(a), rtol=1e-9)
    assert rows.iterations == cells.iterations


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("time_scale", TIME_SCALES)
def test_ph_test_from_sums_equals_row_level(case, time_scale):
    frame = model_frame(8, **CASES[case])
    rows, _, ph = fits(frame, "efron", time_scale)
    reference = proportional_hazards_test(rows, time_scale)
    assert [t.variable for t in reference.checks] == [t.variable for t in ph.checks]
    assert_allclose(
        [t.statistic for t in ph.terms + ph.checks],
        [t.statistic for t in reference.terms + reference.checks],
        rtol=1e-9,
    )


@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_reference_on_the_expanded_cells_equals_hazel(ties):
    """Identical rows merged into one cell with its count, expanded again for statsmodels' PHReg:
    equal to Hazel's fit on the rows and from the sums. (statsmodels' PHReg ``weights`` on the
    merged cells and lifelines' ``weights_col`` with Efron ties are not frequency weights: checked
    here by hand, they give other estimates, so the expanded rows are the reference.)"""
    from statsmodels.duration.hazard_regression import PHReg

    rng = np.random.default_rng(4)
    n = 3000
    frame = pd.DataFrame(
        {
            "_time": rng.integers(1, 40, n).astype(float),
            "_event": (rng.random(n) < 0.6).astype(np.int64),
            "dose": rng.integers(0, 3, n).astype(float),
            "male": rng.integers(0, 2, n).astype(float),
        }
    )
    merged = frame.groupby(list(frame.columns), as_index=False).size()
    assert len(merged) < n / 5
    expanded = merged.loc[merged.index.repeat(merged["size"])]
    fitted = PHReg(
        expanded["_time"], expanded[["dose", "male"]], status=expanded["_event"], ties=ties
    ).fit()
    ours = fit_cox(frame, ["dose", "male"], ties=ties)
    source, design, _ = cox_source_from_frame(frame, ["dose", "male"])
    cells, _ = fit_cox_from_sums(source, design, ties=ties, ph_time_scale=None)
    for result in (ours, cells):
        assert_allclose([t.coef for t in result.terms], fitted.params, rtol=1e-6)
        assert_allclose([t.se for t in result.terms], fitted.bse, rtol=1e-6)
