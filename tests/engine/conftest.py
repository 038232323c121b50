"""Reference data shared by the curve, comparison and RMST tests."""

from __future__ import annotations

import pandas as pd
import pytest
from survival_reference_data import simulate

# Freireich et al. (1963) remission times in weeks, 6-MP vs placebo, as published in Gehan (1965)
# and reproduced in Klein & Moeschberger, Survival Analysis, 2nd ed. (2003), section 1.2.
# "+" marks a censored time.
SIX_MP = "6 6 6 6+ 7 9+ 10 10+ 11+ 13 16 17+ 19+ 20+ 22 23 25+ 32+ 32+ 34+ 35+"
PLACEBO = "1 1 2 2 3 4 4 5 5 8 8 8 8 11 11 12 12 15 17 22 23"


def _parse(text: str) -> tuple[list[float], list[int]]:
    times = [float(v.rstrip("+")) for v in text.split()]
    events = [0 if v.endswith("+") else 1 for v in text.split()]
    return times, events


@pytest.fixture
def freireich() -> pd.DataFrame:
    """The 42 patients as a prepared frame (group display order: 6-MP, placebo)."""
    t1, e1 = _parse(SIX_MP)
    t2, e2 = _parse(PLACEBO)
    return pd.DataFrame(
        {
            "_time": t1 + t2,
            "_event": e1 + e2,
            "_group": pd.Categorical(["6-MP"] * 21 + ["placebo"] * 21, ["6-MP", "placebo"]),
        }
    )


@pytest.fixture
def simulated() -> pd.DataFrame:
    return simulate(20261202)
