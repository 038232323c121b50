"""The pages beyond the basics and Save and share, walked in a real headless Chromium.

Uses the server fixture of tests/app/conftest.py and the helpers of tests/app/browser.py;
screenshots go to tests/artifacts/ for a person to look at.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.app.browser import (
    ARTIFACTS,
    demo_page,
    open_dairy_competing_risks,
    wait_until_idle,
    walk_pages,
)

pytestmark = pytest.mark.browser

PAGES = [
    ("competing", "Competing risks", "Causes"),
    ("parametric", "Parametric models", "Which shape fits best"),
    ("landmark", "Landmark analysis", "Subjects kept"),
    ("sample_size", "Sample size and power", "Events and subjects needed"),
    ("share", "Save and share", "Text for a manuscript"),
]


def test_walk_the_pages_beyond_the_basics(server):
    with demo_page(server) as (page, errors):
        for _ in walk_pages(page, PAGES, prefix="beyond_"):
            pass
        # the report is built on the page and offered as a download
        page.get_by_role("button", name="Build the report").click()
        page.get_by_text("Download report (HTML)").first.wait_for(timeout=120_000)
        wait_until_idle(page)
        with page.expect_download() as download:
            page.get_by_text("Download report (HTML)").first.click()
        text = Path(download.value.path()).read_text(encoding="utf-8")
        assert text.startswith("<!DOCTYPE html>") and "Landmark analysis" in text
        # competing risks on the demo with two kinds of event
        open_dairy_competing_risks(page, "overstates the cumulative incidence")
        assert page.locator('[data-testid="stException"]').count() == 0
        page.screenshot(path=str(ARTIFACTS / "beyond_competing_two_causes.png"), full_page=True)
    assert not errors, errors
