"""End to end in a real headless Chromium: start the server, open the demo, walk every page.

Screenshots go to tests/artifacts/ (not committed) so a person can look at what a first-time
user sees. Skips only when /usr/bin/chromium is missing (CI installs it).
"""

from __future__ import annotations

import pytest

from tests.app.browser import ARTIFACTS, demo_page, wait_until_idle, walk_pages

PAGES = [
    ("data_import", "Data import", "Hazel"),
    ("column_roles", "Column roles", "Data-quality report"),
    ("curves", "Curves", "Summary"),
    ("comparison", "Group comparison", "Do the groups differ?"),
    ("regression", "Regression", "Hazard ratios"),
    ("about", "About and cautions", "Cautions"),
]

REGRESSION_TABS = [
    "Model tests",
    "Univariable screen",
    "Proportional hazards",
    "Functional form",
    "Predicted curves",
]

pytestmark = pytest.mark.browser


def _hover_for_tooltip(page) -> str:
    """Move over the first chart until Vega shows a tooltip; return its text."""
    box = page.locator('[data-testid="stVegaLiteChart"]').first.bounding_box()
    for fx in (0.3, 0.35, 0.4, 0.45, 0.5, 0.55, 0.6, 0.65):
        for fy in (0.2, 0.25, 0.3, 0.35, 0.4, 0.45, 0.5, 0.55):
            page.mouse.move(box["x"] + box["width"] * fx, box["y"] + box["height"] * fy)
            page.wait_for_timeout(120)
            tip = page.locator("#vg-tooltip-element")
            if tip.count() and tip.first.is_visible() and tip.first.inner_text().strip():
                return tip.first.inner_text()
    return ""


def test_walk_every_page_on_the_demo(server):
    with demo_page(server) as (page, errors):
        for slug in walk_pages(page, PAGES):
            if slug == "regression":
                for tab in REGRESSION_TABS:
                    page.get_by_role("tab", name=tab).first.click()
                    wait_until_idle(page)
                    assert page.locator('[data-testid="stException"]').count() == 0, tab
                    name = tab.lower().replace(" ", "_")
                    page.screenshot(path=str(ARTIFACTS / f"regression_{name}.png"), full_page=True)
            if slug == "curves":
                # A curve is drawn, and hovering it shows time, estimate, interval and at risk.
                assert page.locator('[data-testid="stVegaLiteChart"]').count() >= 1
                tip = _hover_for_tooltip(page)
                for word in ("Time", "Estimate", "Interval from", "Interval to", "At risk"):
                    assert word in tip, tip
        # Presentation mode on the curves page: larger figure, still no error.
        page.get_by_role("link", name="Curves").first.click()
        page.get_by_text("Summary").first.wait_for(timeout=60_000)
        page.get_by_text("Presentation mode").first.click()
        wait_until_idle(page)
        assert page.locator('[data-testid="stException"]').count() == 0
        page.screenshot(path=str(ARTIFACTS / "curves_presentation.png"), full_page=True)
    assert errors == []
