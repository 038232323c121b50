"""Optimism-corrected concordance and calibration slope by the bootstrap.

A model scores better on the data it was fitted to than it will on new patients. Harrell's
bootstrap (Harrell, Lee and Mark 1996, Stat Med 15:361–387; Harrell 2015, Regression Modeling
Strategies, 2nd ed., section 5.3.5) estimates by how much: for each replicate, draw n rows with
replacement, refit the model on them, and take

    optimism_C = C of the refitted model on its own sample - C of it on the original rows,
    slope      = coefficient of its linear predictor in a Cox model on the original rows.

The corrected C is the apparent C minus the mean optimism; the corrected calibration slope is
1 minus the mean optimism of the slope (apparent slope 1), i.e. the mean test slope. A slope
below 1 says the predictions are too extreme (overfitting): shrink them.

Resampling: ``numpy.random.default_rng(seed)``; replicate b draws
``rng.integers(0, n, size=n)`` as positions in the model's sorted rows, one call per replicate in
order, so a given seed always gives the same replicates. The refits start from zero, with the
model's ties, strata and design (covariates centred and scaled as in the original fit).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from engine.cox.concordance import harrell_c
from engine.cox.fit import CoxResult
from engine.cox.likelihood import build_layout, newton_raphson
from engine.errors import AnalysisError
from engine.json_values import json_float

DEFAULT_REPLICATES = 100
DEFAULT_SEED = 20261202


@dataclass(frozen=True)
class OptimismResult:
    replicates: int
    seed: int
    c_apparent: float
    c_optimism: float
    c: float  # corrected
    slope: float  # corrected calibration slope
    failed: int  # replicates whose refit did not converge (kept, counted)

    def to_dict(self) -> dict:
        return {
            "c": json_float(self.c),
            "c_apparent": json_float(self.c_apparent),
            "c_optimism": json_float(self.c_optimism),
            "slope": json_float(self.slope),
            "replicates": int(self.replicates),
            "seed": int(self.seed),
            "not_converged": int(self.failed),
        }


def bootstrap_optimism(
    result: CoxResult,
    *,
    replicates: int = DEFAULT_REPLICATES,
    seed: int = DEFAULT_SEED,
    progress: Callable[[int, int], None] | None = None,
) -> OptimismResult:
    """Optimism-corrected Harrell's C and calibration slope; ``progress(done, total)`` is
    called after each replicate (the app draws a progress bar with it)."""
    if not 1 <= int(replicates) <= 10_000:
        raise AnalysisError(
            f"The number of bootstrap replicates must be 1 to 10000; got {replicates!r}."
        )
    model = result.model
    layout = model.layout
    if layout.has_entry:
        raise AnalysisError(
            "The bootstrap of optimism is not available with delayed entry (an entry-time role)."
        )
    stratified = bool(model.strata_levels)
    strata = layout.stratum if stratified else None
    x = model.scaled
    n = len(layout.time)
    rng = np.random.default_rng(int(seed))
    optimism = np.empty(int(replicates))
    slopes = np.empty(int(replicates))
    failed = 0
    for b in range(int(replicates)):
        rows = rng.integers(0, n, size=n)
        sample = build_layout(layout.time[rows], layout.event[rows], layout.stratum[rows])
        x_sample = x[rows][sample.order]
        fit = newton_raphson(sample, x_sample, result.ties)
        failed += not fit.converged
        own = harrell_c(
            sample.time, sample.event, x_sample @ fit.beta, sample.stratum if stratified else None
        )
        score = x @ fit.beta
        test = harrell_c(layout.time, layout.event, score, strata)
        optimism[b] = own.concordance - test.concordance
        slopes[b] = newton_raphson(layout, (score - score.mean())[:, None], result.ties).beta[0]
        if progress is not None:
            progress(b + 1, int(replicates))
    apparent = result.concordance.concordance
    return OptimismResult(
        replicates=int(replicates),
        seed=int(seed),
        c_apparent=float(apparent),
        c_optimism=float(optimism.mean()),
        c=float(apparent - optimism.mean()),
        slope=float(slopes.mean()),
        failed=int(failed),
    )
