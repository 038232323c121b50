"""Reference data shared by the curve, comparison and RMST tests."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

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


def simulate(seed: int, n: int = 600, groups: int = 4, strata: int = 3) -> pd.DataFrame:
    """Seeded data with heavy ties (integer times 1..12), censoring, 4 groups and 3 strata."""
    rng = np.random.default_rng(seed)
    group = rng.integers(0, groups, n)
    stratum = rng.integers(0, strata, n)
    latent = rng.exponential(6.0 / (1.0 + 0.3 * group + 0.2 * stratum))
    censor = rng.uniform(0, 14, n)
    time = np.ceil(np.minimum(latent, censor)).clip(1, 12)
    event = (latent <= censor).astype(int)
    labels = [f"g{i}" for i in range(groups)]
    return pd.DataFrame(
        {
            "_time": time,
            "_event": event,
            "_group": pd.Categorical.from_codes(group, labels),
            "_strata": pd.Categorical.from_codes(stratum, [f"s{i}" for i in range(strata)]),
        }
    )


@pytest.fixture
def simulated() -> pd.DataFrame:
    return simulate(20261202)
