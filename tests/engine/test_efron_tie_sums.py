"""Efron's sums over many tied events in closed form equal the sums taken term by term.

The closed forms (log Γ, ψ and ψ′ differences) are exact identities; the check is the
definition itself, summed l = 0..d−1 one term at a time, and a Cox fit on data with thousands
of tied events per time against the row-level fit and statsmodels' PHReg.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from engine.aggregate import cox_sums
from engine.aggregate.cox_fit import fit_cox_from_sums
from engine.aggregate.memory import cox_source_from_frame
from engine.cox.fit import fit_cox


def term_by_term(d, r0, d0):
    """The six sums straight from their definition, one tied event at a time."""
    out = np.zeros((6, len(d)))
    for g, (n, r, e) in enumerate(zip(d, r0, d0, strict=True)):
        f = np.arange(n) / n
        den = r - f * e
        a, b = 1.0 / den, f / den
        out[:, g] = [np.log(den).sum(), a.sum(), b.sum(), (a * a).sum(), (a * b).sum(),
                     (b * b).sum()]  # fmt: skip
    return out


@pytest.mark.parametrize("spread", ["registry", "everyone fails", "mixed"])
def test_closed_form_equals_term_by_term(spread):
    rng = np.random.default_rng({"registry": 1, "everyone fails": 2, "mixed": 3}[spread])
    d = rng.integers(cox_sums.EFRON_DIRECT_TIES + 1, 6000, 200)
    unit = 10 ** rng.uniform(-3, 3, 200)  # mean weight of an event: any scale
    d0 = d * unit
    if spread == "registry":  # thousands of events among up to 1e9 times as many at risk
        ratio = 10 ** rng.uniform(1, 9, 200)
    elif spread == "everyone fails":  # the risk set is the tied events plus at most a few
        ratio = 1 + rng.integers(0, 8, 200) / d
    else:
        ratio = 10 ** rng.uniform(0, 3, 200)
    r0 = d0 * ratio
    fast = np.array(cox_sums._efron_sums(d, r0, d0, "efron"))
    slow = term_by_term(d, r0, d0)
    # log-likelihood, Σ a and Σ a² carry the result: each to 1e-12
    for i in (0, 1, 3):
        assert_allclose(fast[i], slow[i], rtol=1e-12)
    # Σ b, Σ ab, Σ b² are Efron's corrections, smaller than Σ a, Σ a², Σ a² by d/x, d/x and
    # (d/x)²; they enter the score and information scaled so: relative to that scale, 1e-12
    x = r0 / unit
    scale = {2: slow[1] * x / d, 4: slow[3] * x / d, 5: slow[3] * (x / d) ** 2}
    for i, size in scale.items():
        assert np.all(np.abs(fast[i] - slow[i]) <= 1e-12 * size)


def heavy_ties(seed: int, n: int = 40_000) -> pd.DataFrame:
    """Follow-up recorded in whole quarters: a dozen distinct times, ~2,000 events at each."""
    rng = np.random.default_rng(seed)
    dose = rng.normal(0, 1, n)
    arm = rng.integers(0, 2, n).astype(float)
    time = np.ceil(rng.exponential(4 / np.exp(0.3 * dose - 0.4 * arm)).clip(max=12))
    return pd.DataFrame(
        {
            "_time": time,
            "_event": (rng.random(n) < 0.8).astype(np.int64),
            "dose": dose,
            "arm": arm,
        }
    )


def test_fit_with_thousands_of_ties_equals_row_level_and_statsmodels():
    from statsmodels.duration.hazard_regression import PHReg

    frame = heavy_ties(5)
    per_time = frame.groupby("_time")["_event"].sum()
    assert per_time.min() > cox_sums.EFRON_DIRECT_TIES  # every time in closed form
    rows = fit_cox(frame, ["dose", "arm"], ties="efron")
    source, design, _ = cox_source_from_frame(frame, ["dose", "arm"])
    cells, _ = fit_cox_from_sums(source, design, ties="efron", ph_time_scale=None)
    assert_allclose([t.coef for t in cells.terms], [t.coef for t in rows.terms], rtol=1e-9)
    assert_allclose([t.se for t in cells.terms], [t.se for t in rows.terms], rtol=1e-9)
    assert_allclose(cells.loglik, rows.loglik, rtol=1e-12)
    fitted = PHReg(frame["_time"], frame[["dose", "arm"]], status=frame["_event"], ties="efron")
    reference = fitted.fit()
    assert_allclose([t.coef for t in cells.terms], reference.params, rtol=1e-6)
    assert_allclose([t.se for t in cells.terms], reference.bse, rtol=1e-6)
