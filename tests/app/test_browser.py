"""End to end in a real headless Chromium: start the server, open the demo, walk every page.

Screenshots go to tests/artifacts/ (not committed) so a person can look at what a first-time
user sees. Skips only when /usr/bin/chromium is missing (CI installs it).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "tests" / "artifacts"
CHROMIUM = Path("/usr/bin/chromium")
ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
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


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def server():
    if not CHROMIUM.exists():
        pytest.skip("Chromium is not installed at /usr/bin/chromium (CI installs it with apt-get)")
    port = _free_port()
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    process = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "streamlit",
            "run",
            "app/hazel.py",
            "--server.address=127.0.0.1",
            f"--server.port={port}",
            "--server.headless=true",
            "--browser.gatherUsageStats=false",
        ],
        cwd=ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
    )
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            with urllib.request.urlopen(url + "/_stcore/health", timeout=2) as response:
                if response.status == 200:
                    break
        except OSError:
            time.sleep(0.3)
    else:
        process.kill()
        output = process.stdout.read().decode(errors="replace") if process.stdout else ""
        pytest.fail(f"The app did not start within 60 s:\n{output[-3000:]}")
    yield url
    process.terminate()
    try:
        process.wait(timeout=10)
    except subprocess.TimeoutExpired:
        process.kill()


def _wait_until_idle(page) -> None:
    """Streamlit shows a 'running' indicator while the script runs; wait for it to go."""
    page.wait_for_timeout(500)
    page.wait_for_function(
        "() => !document.querySelector('[data-testid=\"stStatusWidget\"]')", timeout=60_000
    )
    page.wait_for_timeout(800)


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
    from playwright.sync_api import sync_playwright  # a test requirement: fail, never skip

    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=ARGS)
        page = browser.new_page(viewport={"width": 1400, "height": 2400})
        errors: list[str] = []
        page.on("pageerror", lambda error: errors.append(str(error)))
        page.goto(server, wait_until="networkidle")
        page.get_by_text("Invented demo data").first.wait_for(timeout=60_000)
        for slug, title, marker in PAGES:
            page.get_by_role("link", name=title).first.click()
            page.get_by_text(marker, exact=False).first.wait_for(timeout=60_000)
            _wait_until_idle(page)
            assert page.locator('[data-testid="stException"]').count() == 0, slug
            page.screenshot(path=str(ARTIFACTS / f"{slug}.png"), full_page=True)
            if slug == "regression":
                for tab in REGRESSION_TABS:
                    page.get_by_role("tab", name=tab).first.click()
                    _wait_until_idle(page)
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
        _wait_until_idle(page)
        assert page.locator('[data-testid="stException"]').count() == 0
        page.screenshot(path=str(ARTIFACTS / "curves_presentation.png"), full_page=True)
        browser.close()
    assert errors == []
