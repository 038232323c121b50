"""Harrell's C from counted cells (``concordance_from_counts``) equals the row-level
``harrell_c`` (itself checked against lifelines in test_concordance.py), estimate and standard
error, whether identical rows come as one cell or as several cells (a database hands over the
kept cells without merging those that share a score and a time)."""

import numpy as np
import pandas as pd
import pytest

from engine.aggregate.concordance_counts import concordance_from_counts
from engine.cox.concordance import harrell_c
from engine.sorted_codes import sorted_codes


@pytest.mark.parametrize("split", [False, True])
def test_counts_equal_rows(split):
    rng = np.random.default_rng(17)
    n = 3000
    time = rng.integers(1, 60, n).astype(float)
    event = (rng.random(n) < 0.6).astype(np.int64)
    score = np.round(rng.normal(0, 1, n), 1)
    rows = pd.DataFrame({"time": time, "event": event, "score": score})
    cells = rows.groupby(["score", "time", "event"], as_index=False).size()
    if split:  # every cell of two or more rows handed over as two cells
        big = cells[cells["size"] > 1].copy()
        first = big["size"] // 2
        cells.loc[big.index, "size"] = first
        cells = pd.concat([cells, big.assign(size=big["size"] - first)], ignore_index=True)
        assert len(cells) > rows.groupby(["score", "time", "event"]).ngroups
    scores, bins = sorted_codes(cells["score"].to_numpy())
    counted = concordance_from_counts(
        {
            "stratum": np.zeros(len(cells), np.int64),
            "bin": bins,
            "time": cells["time"].to_numpy(float),
            "event": cells["event"].to_numpy(np.int64),
            "rows": cells["size"].to_numpy(np.int64),
        },
        None,
        len(scores),
        exact=True,
    )
    reference = harrell_c(time, event == 1, score)
    assert counted.error_bound == 0.0
    assert counted.concordance == pytest.approx(reference.concordance, rel=1e-12)
    assert counted.standard_error == pytest.approx(reference.standard_error, rel=1e-9)
