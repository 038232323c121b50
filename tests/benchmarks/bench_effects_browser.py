"""Display switches of the "Effects in depth" page as a user sees them, in headless Chromium
(a measurement, not a test): ``.venv/bin/python tests/benchmarks/bench_effects_browser.py``.

Opens the demo the app starts with and times, on "Effects in depth", from the click to the
moment the spline figure is redrawn (the page's drawing changes) for its "Interval band" and
"Log scale" toggles (the spline model is fitted once, before the timing).
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.app.browser import demo_page, run_server, wait_until_idle  # noqa: E402

# the drawing of every figure on the page (SVG, or canvas pixels where the renderer draws on a
# canvas): it changes when any of them is redrawn
FIGURES = (
    '() => [...document.querySelectorAll(\'[data-testid="stVegaLiteChart"] svg.marks, '
    '[data-testid="stVegaLiteChart"] canvas\')]'
    ".map(s => s.tagName === 'CANVAS' ? s.toDataURL() : s.innerHTML).join('|')"
)
REMEMBER = f"() => {{ window.__before = ({FIGURES})(); }}"
CHANGED = f"() => ({FIGURES})() !== window.__before"


def timed_toggle(page, label: str) -> float:
    toggle = page.get_by_text(label, exact=True).first
    wait_until_idle(page)
    page.evaluate(REMEMBER)
    start = time.perf_counter()
    toggle.click()
    page.wait_for_function(CHANGED, timeout=60_000)
    return time.perf_counter() - start


def main() -> None:
    server = run_server()
    url = next(server)
    results: dict[str, list[float]] = {}
    try:
        with demo_page(url) as (page, _errors):
            page.get_by_role("link", name="Effects in depth").first.click()
            page.get_by_text("Hazard ratio by", exact=False).first.wait_for(timeout=120_000)
            wait_until_idle(page)
            for label in ("Interval band", "Log scale"):
                results[f"Effects in depth: {label}"] = [
                    timed_toggle(page, label) for _ in range(6)
                ]
    finally:
        next(server, None)
    print("Display switches, headless Chromium (click to redrawn figure)")
    for name, values in results.items():
        print(
            f"  {name}: " + ", ".join(f"{v:.2f}" for v in values)
            + f" s; median {statistics.median(values):.2f} s"
        )  # fmt: skip


if __name__ == "__main__":
    main()
