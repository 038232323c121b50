"""The memory backend of the aggregation layer: a prepared frame in, counts and Cox sums out.

It is the reference the database backends are tested against, and what ``--backend memory``
would aggregate; the rows never leave numpy.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from engine.aggregate.cox_sums import ArraySource
from engine.cox.concordance import harrell_c
from engine.cox.design import Design, build_design


def cox_source_from_frame(
    frame: pd.DataFrame,
    covariates: Sequence[str],
    *,
    categorical: Sequence[str] = (),
    reference=None,
    strata: str | None = None,
    entry: str | None = None,
) -> tuple[ArraySource, Design, object]:
    """The scaled design of ``fit_cox`` as an ``ArraySource``, its ``Design`` and a function
    giving Harrell's C for coefficients on the scaled design (rows are at hand here)."""
    required = [c for c in ("_time", "_event", strata, entry) if c is not None]
    design = build_design(
        frame, covariates, categorical=categorical, reference=reference, required=required
    )
    used = design.used
    time = frame["_time"].to_numpy(dtype=float)[used]
    event = frame["_event"].to_numpy(dtype=float)[used] == 1
    codes = None
    if strata is not None:
        codes = pd.Categorical(frame[strata].to_numpy()[used]).codes.astype(np.int64)
    entry_values = None if entry is None else frame[entry].to_numpy(dtype=float)[used]
    scaled = (design.matrix - design.center) / design.scale
    source = ArraySource(scaled, time, event, codes, entry_values)

    def concordance(beta):
        return harrell_c(time, event, scaled @ beta, codes, entry=entry_values)

    return source, design, concordance
