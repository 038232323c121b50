"""Events and subjects needed to compare two groups' survival, and the power a design gives.

Two published approximations for a two-group comparison by the log-rank test (or a Cox model with
one binary covariate) under proportional hazards:

- Schoenfeld (1983, Biometrics 39:499-503): events D = (z_a + z_b)^2 (1 + k)^2 / (k log(HR)^2)
- Freedman (1982, Statistics in Medicine 1:121-129): D = (z_a + z_b)^2 (1 + k HR)^2 / (k (1 - HR)^2)

with k the allocation ratio (experimental : control subjects), z_a the normal quantile for alpha
(alpha / 2 when two-sided) and z_b the quantile for the power. Subjects needed = events needed
divided by the expected probability that a subject has the event during the study. Both formulas
ignore the negligible chance of rejecting in the wrong direction, so power and events needed are
exact inverses of each other.

Every error here is a ``SettingError``: the numbers come from the settings alone, so a run
stops with the message rather than leaving the section out.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Literal

import numpy as np
import pandas as pd
from scipy.stats import norm

from engine.errors import SettingError

Method = Literal["schoenfeld", "freedman"]
METHODS: tuple[str, ...] = ("schoenfeld", "freedman")
MAX_SUBJECTS = 1e12  # beyond any study; keeps the counts exact whole numbers


@dataclass(frozen=True)
class SampleSize:
    """Events and subjects needed for one design; counts are rounded up to whole numbers."""

    method: str
    hazard_ratio: float
    alpha: float
    sides: int
    power: float
    allocation_ratio: float
    event_probability: float
    events_exact: float
    events: int
    subjects: int
    subjects_control: int
    subjects_experimental: int

    def to_dict(self) -> dict:
        return {
            k: (float(v) if isinstance(v, float | np.floating) else v)
            for k, v in asdict(self).items()
        }

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([self.to_dict()])


@dataclass(frozen=True)
class PowerCurve:
    """Power against hazard ratio for a fixed number of events, one row per (method, HR)."""

    events: float
    alpha: float
    sides: int
    allocation_ratio: float
    table: pd.DataFrame  # columns: method, hazard_ratio, power

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def to_dict(self) -> dict:
        return {
            "events": float(self.events),
            "alpha": float(self.alpha),
            "sides": int(self.sides),
            "allocation_ratio": float(self.allocation_ratio),
            "curve": [
                {"method": m, "hazard_ratio": float(h), "power": float(p)}
                for m, h, p in self.table[["method", "hazard_ratio", "power"]].itertuples(
                    index=False
                )
            ],
        }


def _check_design(hazard_ratio, alpha, sides, allocation_ratio, method) -> None:
    if method not in METHODS:
        raise SettingError(f"Unknown sample-size method {method!r}; choose one of {METHODS}.")
    if not (np.isfinite(hazard_ratio) and hazard_ratio > 0 and hazard_ratio != 1):
        raise SettingError(
            f"The target hazard ratio must be a positive number other than 1; got {hazard_ratio!r}."
        )
    if not 0 < alpha < 1:
        raise SettingError(f"Alpha must lie strictly between 0 and 1; got {alpha!r}.")
    if sides not in (1, 2):
        raise SettingError(f"The test must be one- or two-sided (1 or 2); got {sides!r}.")
    if not (np.isfinite(allocation_ratio) and allocation_ratio > 0):
        raise SettingError(
            "The allocation ratio (experimental : control subjects) must be a positive number; "
            f"got {allocation_ratio!r}."
        )


def _effect_factor(hazard_ratio, allocation_ratio: float, method: str):
    """Per-event information for the chosen formula: D * factor = (z_a + z_b)^2.

    Written so that extreme inputs cannot overflow: k / (1 + k)^2 as 1 / (k + 2 + 1/k), and
    Freedman's (1 - HR)^2 / (1 + k HR)^2 as the square of the ratio."""
    k = np.float64(allocation_ratio)
    hr = np.asarray(hazard_ratio, dtype=float)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        if method == "schoenfeld":
            return np.log(hr) ** 2 / (k + 2 + 1 / k)
        return k * ((1 - hr) / (1 + k * hr)) ** 2


def events_needed(
    hazard_ratio: float,
    *,
    power: float = 0.8,
    alpha: float = 0.05,
    sides: int = 2,
    allocation_ratio: float = 1.0,
    event_probability: float = 1.0,
    method: Method = "schoenfeld",
) -> SampleSize:
    """Events (and subjects, given the expected event probability) for a two-group comparison."""
    _check_design(hazard_ratio, alpha, sides, allocation_ratio, method)
    if not 0 < power < 1:
        raise SettingError(f"Power must lie strictly between 0 and 1; got {power!r}.")
    if not 0 < event_probability <= 1:
        raise SettingError(
            "The expected event probability (share of subjects who have the event during the "
            f"study) must lie in (0, 1]; got {event_probability!r}."
        )
    z_a = norm.isf(alpha / sides)  # not ppf(1 - a): 1 - 1e-300 is 1.0 in floating point
    z_b = norm.ppf(power)
    if z_a + z_b <= 0:
        raise SettingError(
            f"Power {power} is below the false-positive rate {alpha / sides}; ask for more power."
        )
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        exact = float((z_a + z_b) ** 2 / _effect_factor(hazard_ratio, allocation_ratio, method))
        total = exact / event_probability
    if not (math.isfinite(total) and total <= MAX_SUBJECTS):
        raise SettingError(
            f"This design needs more than {MAX_SUBJECTS:,.0f} subjects ({method}: hazard ratio "
            f"{hazard_ratio:g}, alpha {alpha:g}, power {power:g}, allocation {allocation_ratio:g}, "
            f"event probability {event_probability:g}): no study can be that large. Choose a "
            "hazard ratio further from 1, a larger alpha or a larger event probability."
        )
    events = math.ceil(exact)
    # Subjects per arm are rounded up separately so the total honours the allocation ratio.
    control = math.ceil(total / (1 + allocation_ratio))
    experimental = math.ceil(total * allocation_ratio / (1 + allocation_ratio))
    return SampleSize(
        method=method,
        hazard_ratio=float(hazard_ratio),
        alpha=float(alpha),
        sides=int(sides),
        power=float(power),
        allocation_ratio=float(allocation_ratio),
        event_probability=float(event_probability),
        events_exact=exact,
        events=events,
        subjects=control + experimental,
        subjects_control=control,
        subjects_experimental=experimental,
    )


def power_for_events(
    events: float,
    hazard_ratio,
    *,
    alpha: float = 0.05,
    sides: int = 2,
    allocation_ratio: float = 1.0,
    method: Method = "schoenfeld",
):
    """Power to detect ``hazard_ratio`` with ``events`` events (a float, or an array for arrays)."""
    hrs = np.atleast_1d(np.asarray(hazard_ratio, dtype=float))
    for hr in hrs:
        _check_design(float(hr), alpha, sides, allocation_ratio, method)
    if not (np.isfinite(events) and events > 0):
        raise SettingError(f"The number of events must be positive; got {events!r}.")
    z_a = norm.isf(alpha / sides)
    with np.errstate(over="ignore", invalid="ignore"):
        power = norm.cdf(np.sqrt(events * _effect_factor(hrs, allocation_ratio, method)) - z_a)
    return float(power[0]) if np.ndim(hazard_ratio) == 0 else power


def power_curve(
    events: float,
    hazard_ratios=None,
    *,
    alpha: float = 0.05,
    sides: int = 2,
    allocation_ratio: float = 1.0,
    methods: tuple[str, ...] = METHODS,
) -> PowerCurve:
    """Power against hazard ratio (default grid 0.40 to 0.99 and 1.01 to 2.5) for plotting."""
    if hazard_ratios is None:
        grid = np.r_[np.arange(0.40, 0.995, 0.01), np.arange(1.01, 2.505, 0.01)]
        hazard_ratios = np.round(grid, 2)
    hrs = np.asarray(hazard_ratios, dtype=float)
    rows = [
        pd.DataFrame(
            {
                "method": method,
                "hazard_ratio": hrs,
                "power": power_for_events(
                    events,
                    hrs,
                    alpha=alpha,
                    sides=sides,
                    allocation_ratio=allocation_ratio,
                    method=method,
                ),
            }
        )
        for method in methods
    ]
    return PowerCurve(
        events=float(events),
        alpha=float(alpha),
        sides=int(sides),
        allocation_ratio=float(allocation_ratio),
        table=pd.concat(rows, ignore_index=True),
    )
