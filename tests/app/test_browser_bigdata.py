"""Big data in a real headless Chromium: a Parquet folder in the configured data folder opens
where it is (DuckDB), and the Curves and Regression pages draw from its per-time counts, with
the same counts as the engine in memory on the same rows (the numbers themselves are checked
against memory to 1e-9 in test_bigdata.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from engine.prepare.checks import prepare
from engine.prepare.roles import Roles
from tests.aggregate.conftest import load_table, postgres_url  # noqa: F401  (session fixture)
from tests.app.browser import ARTIFACTS, demo_page, run_server, wait_until_idle

pytestmark = pytest.mark.browser


def registry(n: int = 4000, seed: int = 12) -> pd.DataFrame:
    """An invented registry extract: days to an event, two arms, an age."""
    rng = np.random.default_rng(seed)
    arm = rng.choice(["control", "treated"], n)
    age = rng.integers(40, 90, n).astype(float)
    event = rng.exponential(900 / np.exp(0.02 * (age - 65) - 0.3 * (arm == "treated")))
    censor = rng.uniform(100, 2000, n)
    return pd.DataFrame(
        {
            "days": np.ceil(np.minimum(event, censor)),
            "died": (event <= censor).astype(int),
            "arm": arm,
            "age": age,
        }
    )


@pytest.fixture
def folder_server(tmp_path, monkeypatch):
    frame = registry()
    parts = tmp_path / "data" / "registry"
    parts.mkdir(parents=True)
    for i, piece in enumerate(np.array_split(frame, 3)):
        piece.to_parquet(parts / f"part-{i}.parquet")
    monkeypatch.setenv("HAZEL_DATA_FOLDER", str(tmp_path / "data"))
    server = run_server()
    url = next(server)
    yield url, frame
    next(server, None)


def test_a_parquet_folder_opens_where_it_is_and_draws(folder_server):
    url, frame = folder_server
    with demo_page(url) as (page, errors):
        page.get_by_text("Open from this computer's data folder").first.wait_for(timeout=60_000)
        page.locator(".st-key-import_folder_open_button button").click()
        wait_until_idle(page)
        page.get_by_text("read by DuckDB", exact=False).first.wait_for(timeout=60_000)
        page.get_by_role("link", name="Curves").first.click()
        page.get_by_text("Computed where the data are", exact=False).first.wait_for(timeout=120_000)
        wait_until_idle(page)
        assert page.locator('[data-testid="stVegaLiteChart"]').count() >= 1
        text = page.locator("body").inner_text()
        page.screenshot(path=str(ARTIFACTS / "bigdata_curves.png"), full_page=True)
        page.get_by_role("link", name="Regression").first.click()
        page.get_by_role("heading", name="Regression").first.wait_for(timeout=60_000)
        page.get_by_text("Computed where the data are", exact=False).first.wait_for(timeout=120_000)
        wait_until_idle(page)
        assert page.locator('[data-testid="stVegaLiteChart"]').count() >= 1  # the forest plot
        page.screenshot(path=str(ARTIFACTS / "bigdata_regression.png"), full_page=True)
        page.get_by_role("link", name="Save and share").first.click()
        page.get_by_text("Download report (HTML)").first.wait_for(timeout=120_000)
        wait_until_idle(page)
        assert page.get_by_text("Download recipe").count() >= 1
        page.screenshot(path=str(ARTIFACTS / "bigdata_share.png"), full_page=True)
        assert errors == []
    prepared = prepare(frame, Roles(time="days", event="died", group="arm"))
    events = int(prepared.frame["_event"].sum())
    # the caption under the figure (the tables are drawn on a canvas, not as page text)
    assert f"4,000 rows read, 4,000 used, 0 excluded · {events:,} events, " in text
    assert f"{len(frame) - events:,} censored" in text
