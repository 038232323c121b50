"""The Prediction performance page and the Fine–Gray model of the Competing risks page, in a
real headless Chromium: no exception, the bootstrap's progress bar runs to its result, and the
figures are drawn. Screenshots go to tests/artifacts/."""

from __future__ import annotations

import pytest

from tests.app.browser import (
    ARTIFACTS,
    click_when_settled,
    demo_page,
    open_dairy_competing_risks,
    wait_until_idle,
)

pytestmark = pytest.mark.browser


def test_performance_page_and_fine_gray_model(server):
    with demo_page(server) as (page, errors):
        page.get_by_role("link", name="Prediction performance").first.click()
        page.get_by_text("Discrimination", exact=False).first.wait_for(timeout=60_000)
        wait_until_idle(page)
        replicates = page.get_by_label("Replicates")
        replicates.fill("5")
        replicates.press("Enter")
        wait_until_idle(page)
        page.get_by_role("button", name="Run the bootstrap").click()
        page.get_by_text("Optimism-corrected C").first.wait_for(timeout=120_000)
        wait_until_idle(page)
        assert page.locator('[data-testid="stException"]').count() == 0
        assert page.locator("canvas, svg.marks").count() >= 1  # the calibration figure
        page.screenshot(path=str(ARTIFACTS / "finegray_performance.png"), full_page=True)

        open_dairy_competing_risks(page)
        click_when_settled(page, page.get_by_role("combobox", name="Cause modelled"))
        page.keyboard.type("died")
        page.keyboard.press("Enter")
        page.get_by_text("Predicted cumulative incidence of died").first.wait_for(timeout=60_000)
        wait_until_idle(page)
        assert page.locator('[data-testid="stException"]').count() == 0
        assert page.get_by_text("does not say by how much").count() >= 1
        page.screenshot(path=str(ARTIFACTS / "finegray_competing.png"), full_page=True)
        assert errors == []
