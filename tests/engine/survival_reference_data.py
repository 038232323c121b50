"""Seeded simulated survival data shared by the engine tests."""

from __future__ import annotations

import numpy as np
import pandas as pd


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
