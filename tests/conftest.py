"""Shared fixtures."""

from __future__ import annotations

import numpy as np
import pytest


@pytest.fixture
def rng() -> np.random.Generator:
    """A seeded generator: tests must not depend on a fresh random seed."""
    return np.random.default_rng(20261202)
