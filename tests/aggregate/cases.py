"""Invented raw data with every exclusion reason, and a comparison of analyze JSON objects."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pandas as pd

from engine.roles import Roles


def messy_frame(seed: int = 0, n: int = 1500) -> pd.DataFrame:
    """Day-rounded times (ties), text events with an unknown code, 3 sites with gaps, strata,
    delayed entry, a numeric and a categorical covariate with missing values, and rows that
    meet every exclusion reason the roles below can produce."""
    rng = np.random.default_rng(seed)
    age = np.round(rng.normal(62, 9, n), 1)
    site = rng.choice(["north", "south", "east"], n, p=[0.5, 0.3, 0.2]).astype(object)
    risk = np.exp(0.04 * (age - 62) + np.where(site == "south", 0.4, 0.0))
    time = np.ceil(rng.exponential(200 / risk)).astype(float)
    status = np.where(rng.random(n) < 0.65, "dead", "alive").astype(object)
    frame = pd.DataFrame(
        {
            "days": time,
            "status": status,
            "site": site,
            "ward": rng.choice(["A", "B"], n).astype(object),
            "enrolled": np.floor(time * rng.random(n) * 0.5),
            "age": age,
            "stage": rng.choice(["I", "II", "III"], n).astype(object),
        }
    )
    picks = rng.permutation(n)
    frame.loc[picks[:15], "days"] = np.nan  # missing time
    frame.loc[picks[15:25], "days"] = -3.0  # negative time
    frame.loc[picks[25:35], "status"] = None  # missing event
    frame.loc[picks[35:40], "status"] = "lost?"  # unknown event value
    frame.loc[picks[40:48], "enrolled"] = np.nan  # missing entry
    frame.loc[picks[48:60], "enrolled"] = frame.loc[picks[48:60], "days"] + 1  # entry after exit
    frame.loc[picks[60:110], "site"] = None  # rows without a group
    frame.loc[picks[110:150], "age"] = np.nan  # missing covariates
    frame.loc[picks[150:170], "stage"] = None
    frame.loc[picks[170:180], "ward"] = None  # rows without a stratum
    return frame


ROLES = Roles(
    time="days",
    event="status",
    group="site",
    covariates=("age", "stage"),
    categorical=("stage",),
    strata="ward",
    entry="enrolled",
)

SETTINGS = {
    "curves": {"times": [100.0, 365.0], "confidence": 0.9},
    "comparison": {"test": "tarone-ware"},
    "cox": {"ties": "efron", "ph_time_scale": "survival"},
}


# keys a database's result has beside memory's: the error bound of Harrell's C of score bins
DATABASE_ONLY_KEYS = frozenset({"concordance_error_bound"})


def assert_same_json(a, b, *, rtol=1e-9, path="", skip=()):
    """Equal structures, numbers within ``rtol`` (None matches None only); ``b`` may have the
    ``DATABASE_ONLY_KEYS`` besides."""
    if path in skip:
        return
    if isinstance(a, dict):
        assert isinstance(b, dict), path
        assert set(a) == set(b) - DATABASE_ONLY_KEYS, (path, set(a) ^ set(b))
        for key in a:
            assert_same_json(a[key], b[key], rtol=rtol, path=f"{path}.{key}", skip=skip)
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), (path, a, b)
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            assert_same_json(x, y, rtol=rtol, path=f"{path}[{i}]", skip=skip)
    elif isinstance(a, bool) or a is None or isinstance(a, str):
        assert a == b, (path, a, b)
    elif isinstance(a, int | float):
        assert isinstance(b, int | float) and not isinstance(b, bool), (path, a, b)
        assert math.isclose(a, b, rel_tol=rtol, abs_tol=1e-12), (path, a, b)
    else:
        assert a == b, (path, a, b)


def competing_frame(seed: int = 0, n: int = 1500, *, continuous: bool = False) -> pd.DataFrame:
    """``messy_frame`` with three named causes in the status column ("dead", "relapse",
    "moved"; "alive" censored); with ``continuous`` the times and the age are not rounded, so
    there are no tied times and (almost) every linear predictor is distinct."""
    rng = np.random.default_rng(seed + 1000)
    frame = messy_frame(seed, n)
    if continuous:
        frame["days"] = frame["days"] - rng.random(n)  # no ties; negatives and NaN stay so
        frame["age"] = frame["age"] + rng.normal(0, 0.05, n)
    status = frame["status"].to_numpy(dtype=object)
    dead = status == "dead"
    status[dead] = rng.choice(["dead", "relapse", "moved"], int(dead.sum()), p=[0.5, 0.3, 0.2])
    frame["status"] = status
    return frame


COMPETING_ROLES = replace(
    ROLES, event_causes=(("dead", "death"), ("relapse", "relapse"), ("moved", "moved"))
)

COMPETING_SETTINGS = {
    **SETTINGS,
    "competing": {"times": [100.0, 365.0], "fine_gray": "death"},
}
