"""The censoring distribution, for inverse-probability-of-censoring weights.

G(t) = P(C > t) is estimated by Kaplan–Meier with the roles of event and censoring swapped. At a
time where events and censorings are tied, the events are taken to happen first: the censored
subjects at t are compared with those still at risk after the events at t,

    G(t) = prod over times s <= t of (1 - c(s) / (n(s) - d(s))),

n(s) at risk, d(s) events of any kind, c(s) censored at s. This is the usual convention for
censoring weights (a subject who had the event at t was not censored at t), the one the
Fine–Gray weights and the prediction-performance measures (Uno's C, time-dependent AUC, Brier
score) share. ``at`` gives G(t) (right-continuous), ``before`` gives G(t-).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class CensoringSurvival:
    """Step function G: the value ``survival[i]`` holds on [times[i], times[i + 1])."""

    times: np.ndarray
    survival: np.ndarray

    def at(self, t) -> np.ndarray:
        """G(t): the probability of being still uncensored just after t."""
        idx = np.searchsorted(self.times, np.asarray(t, dtype=float), side="right") - 1
        return np.where(idx >= 0, self.survival[np.maximum(idx, 0)], 1.0)

    def before(self, t) -> np.ndarray:
        """G(t-): the probability of being uncensored up to, not including, t."""
        idx = np.searchsorted(self.times, np.asarray(t, dtype=float), side="left") - 1
        return np.where(idx >= 0, self.survival[np.maximum(idx, 0)], 1.0)


def censoring_survival(time, event) -> CensoringSurvival:
    """Kaplan–Meier estimate of the censoring distribution (``event`` true = not censored)."""
    time = np.asarray(time, dtype=float)
    event = np.asarray(event).astype(bool)
    times, key = np.unique(time, return_inverse=True)
    removed = np.bincount(key, minlength=len(times))
    events = np.bincount(key, weights=event.astype(float), minlength=len(times))
    censored = removed - events
    at_risk = np.cumsum(removed[::-1])[::-1] - events
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(censored > 0, 1.0 - censored / at_risk, 1.0)
    return CensoringSurvival(times=times, survival=np.cumprod(factor))
