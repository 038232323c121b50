"""Display switches of the Competing risks page as a user sees them, in headless Chromium (a
measurement, not a test): ``.venv/bin/python tests/benchmarks/bench_competing_browser.py``.

Opens the Dairy herd demo, names the second cause, and times from the click to the moment the
page shows the switched state: the "Show 1 − KM" toggle (the figure's caption changes), and the
Fine–Gray cause (the predicted-incidence heading appears, the model's fit cached after its first
time), and the covariate of the predicted-incidence curves (the figure's drawing changes). Both
blocks are fragments, so in the browser only they rerun.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.app.browser import (  # noqa: E402
    demo_page,
    open_dairy_competing_risks,
    run_server,
    wait_until_idle,
)

KM_CAPTION = "dotted: 1 − Kaplan–Meier"
# the drawing of the page's last figure (the predicted-incidence curves, an SVG): it changes when
# the figure is redrawn for another covariate
LAST_FIGURE = (
    "() => { const c = [...document.querySelectorAll("
    "'[data-testid=\"stVegaLiteChart\"] svg.marks')].pop(); return c ? c.innerHTML : ''; }"
)
# the Dairy herd demo's covariates: switching between them redraws the curves each time
PROFILES = ("farm", "first_calving_age_months")


def timed(page, action, done) -> float:
    start = time.perf_counter()
    action()
    page.wait_for_function(done, timeout=60_000)
    return time.perf_counter() - start


def main() -> None:
    server = run_server()
    url = next(server)
    try:
        with demo_page(url) as (page, _errors):
            open_dairy_competing_risks(page)
            toggle = page.get_by_text("Show 1 − KM", exact=True)
            has_km = f"() => document.body.innerText.includes({KM_CAPTION!r})"
            no_km = f"() => !document.body.innerText.includes({KM_CAPTION!r})"
            km = []
            for _ in range(3):
                km.append(timed(page, toggle.click, no_km))
                wait_until_idle(page)
                km.append(timed(page, toggle.click, has_km))
                wait_until_idle(page)
            cause = page.get_by_role("combobox", name="Cause modelled")
            shown = "() => document.body.innerText.includes('Predicted cumulative incidence of')"
            hidden = "() => !document.body.innerText.includes('Predicted cumulative incidence of')"

            def choose(value):
                # open the list and filter it first: the clock runs from choosing the option
                cause.click()
                page.keyboard.type(value)
                return lambda: page.keyboard.press("Enter")

            fine_gray = []
            for _ in range(3):
                fine_gray.append(timed(page, choose("died"), shown))
                wait_until_idle(page)
                fine_gray.append(timed(page, choose("(none)"), hidden))
                wait_until_idle(page)
            choose("died")()
            page.wait_for_function(shown, timeout=60_000)
            wait_until_idle(page)
            profile = page.get_by_role("combobox", name="Curves for each level of")
            remember = f"() => {{ window.__before = ({LAST_FIGURE})(); }}"
            changed = f"() => ({LAST_FIGURE})() !== window.__before"

            profiles = []
            for _ in range(3):
                for name in PROFILES:
                    # open the list and filter it first: the clock runs from choosing the option
                    page.evaluate(remember)
                    profile.click()
                    page.keyboard.type(name)
                    profiles.append(timed(page, lambda: page.keyboard.press("Enter"), changed))
                    wait_until_idle(page)
    finally:
        next(server, None)
    print("Competing risks page, Dairy herd demo, headless Chromium (click to switched state)")
    print(
        "  Show 1 − KM: " + ", ".join(f"{s:.2f}" for s in km) + f" s; median "
        f"{statistics.median(km):.2f} s"
    )
    print(
        "  predicted-incidence covariate: " + ", ".join(f"{s:.2f}" for s in profiles)
        + f" s; median {statistics.median(profiles):.2f} s"
    )  # fmt: skip
    print(
        "  Fine–Gray cause shown / not shown: " + ", ".join(f"{s:.2f}" for s in fine_gray)
        + f" s; median {statistics.median(fine_gray):.2f} s (the first includes the fit)"
    )  # fmt: skip


if __name__ == "__main__":
    main()
