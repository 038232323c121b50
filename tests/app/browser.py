"""What the end-to-end browser tests share: the Chromium they drive, how they start the app,
open the demo, wait for Streamlit and walk pages. The ``server`` fixture is in conftest.py."""

from __future__ import annotations

import contextlib
import os
import socket
import subprocess
import sys
import time
import urllib.request
from collections.abc import Iterator
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


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def run_server() -> Iterator[str]:
    """Start the app on a free local port, yield its address, stop it afterwards."""
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


@contextlib.contextmanager
def demo_page(server: str):
    """A headless Chromium page on the app with the demo open; yields the page and the list
    that collects its JavaScript errors."""
    from playwright.sync_api import sync_playwright  # a test requirement: fail, never skip

    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=ARGS)
        page = browser.new_page(viewport={"width": 1400, "height": 2400})
        errors: list[str] = []
        page.on("pageerror", lambda error: errors.append(str(error)))
        page.goto(server, wait_until="networkidle")
        page.get_by_text("Invented demo data").first.wait_for(timeout=60_000)
        yield page, errors
        browser.close()


def wait_until_idle(page) -> None:
    """Streamlit shows a 'running' indicator while the script runs; wait for it to go."""
    page.wait_for_timeout(500)
    page.wait_for_function(
        "() => !document.querySelector('[data-testid=\"stStatusWidget\"]')", timeout=60_000
    )
    page.wait_for_timeout(800)


def open_dairy_competing_risks(page, wait_for: str = "Gray's test") -> None:
    """Open the Dairy herd demo on the Competing risks page (it opens with both kinds of event
    named, died and sold), and wait until ``wait_for`` shows."""
    page.get_by_role("link", name="Data import").first.click()
    page.get_by_role("button", name="Dairy herd").first.click()
    wait_until_idle(page)
    page.get_by_role("link", name="Competing risks").first.click()
    page.get_by_text("Causes", exact=False).first.wait_for(timeout=60_000)
    wait_until_idle(page)
    page.get_by_text(wait_for, exact=False).first.wait_for(timeout=60_000)
    wait_until_idle(page)


def click_when_settled(page, locator, attempts: int = 4) -> None:
    """Click ``locator`` once the page is idle; a widget redrawn by a rerun in between (detached
    from the page) is looked up again, so a slow machine does not fail the test."""
    from playwright.sync_api import Error

    for attempt in range(attempts):
        wait_until_idle(page)
        try:
            locator.scroll_into_view_if_needed(timeout=10_000)
            locator.click(timeout=10_000)
            return
        except Error:
            if attempt == attempts - 1:
                raise


def walk_pages(page, pages, prefix: str = "") -> Iterator[str]:
    """Open each (slug, link title, marker text) page from the navigation, check it shows no
    exception and save a screenshot; yields each slug so the caller can look further there."""
    for slug, title, marker in pages:
        page.get_by_role("link", name=title).first.click()
        page.get_by_text(marker, exact=False).first.wait_for(timeout=60_000)
        wait_until_idle(page)
        assert page.locator('[data-testid="stException"]').count() == 0, slug
        page.screenshot(path=str(ARTIFACTS / f"{prefix}{slug}.png"), full_page=True)
        yield slug
