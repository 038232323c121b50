"""Fixtures of the app tests."""

from __future__ import annotations

import pytest

from tests.app.browser import run_server


@pytest.fixture(scope="module")
def server():
    """The app served on a free local port for one browser test module."""
    yield from run_server()
