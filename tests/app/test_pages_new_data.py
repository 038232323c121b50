"""Opening other data resets every page's choices that depend on the data (Streamlit's AppTest):
a time, level or column chosen for one table must not be carried to the next one."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from streamlit.testing.v1 import AppTest

from app import state

ROOT = Path(__file__).resolve().parents[2]
ENTRY = str(ROOT / "app" / "hazel.py")
# Data-independent widget prefixes (app.state.DATA_CHOICE_PREFIXES says why they stay).
KEPT_PREFIXES = ("view_", "import_", "dbconnect_", "share_")
PAGES = (
    "column_roles", "row_filters", "baseline", "curves", "comparison", "regression", "effects",
    "competing", "parametric", "landmark", "sample_size", "performance", "share",
)  # fmt: skip


def _short_file(tmp_path) -> tuple[str, bytes]:
    """Follow-up of at most 3 weeks: any time chosen for the pump demo's months is outside it."""
    rng = np.random.default_rng(24)
    n = 300
    frame = pd.DataFrame(
        {
            "weeks": np.round(rng.uniform(0.1, 3.0, n), 2),
            "died": rng.integers(0, 2, n),
            "arm": rng.choice(["a", "b"], n),
            "age": np.round(rng.normal(60, 8, n)),
        }
    )
    path = tmp_path / "short_follow_up.csv"
    frame.to_csv(path, index=False)
    return path.name, path.read_bytes()


def _open_upload(at: AppTest, name: str, content: bytes) -> None:
    at.switch_page("views/data_import.py").run()
    at.session_state[state.PENDING_UPLOAD] = (name, content)
    at.run()
    assert not at.exception, [e.message for e in at.exception]
    assert at.session_state[state.DATASET_LABEL] == name


def _use_short_file_roles(at: AppTest) -> None:
    at.session_state[state.ROLES] = at.session_state[state.ROLES_SUGGESTED].to_roles(
        time="weeks", event="died", event_values=(1,), group="arm", covariates=("age",)
    )


def test_performance_page_starts_from_the_new_data_times(tmp_path):
    at = AppTest.from_file(ENTRY, default_timeout=240).run()  # opens on the pump demo
    at.switch_page("views/performance.py").run()
    assert not at.error, [e.value for e in at.error]
    old_times = at.session_state["perf_times"]
    _open_upload(at, *_short_file(tmp_path))
    _use_short_file_roles(at)
    at.switch_page("views/performance.py").run()
    assert not at.exception, [e.message for e in at.exception]
    assert not at.error, [e.value for e in at.error]
    new_times = [float(t) for t in at.session_state["perf_times"].split(",")]
    assert at.session_state["perf_times"] != old_times and max(new_times) < 3


def test_every_data_choice_of_every_page_is_forgotten_on_new_data(tmp_path):
    at = AppTest.from_file(ENTRY, default_timeout=240).run()
    for page in PAGES:
        at.switch_page(f"views/{page}.py").run()
        assert not at.exception, (page, [e.message for e in at.exception])
    before = {k for k in at.session_state if isinstance(k, str)}
    widget_keys = {k for k in before if not k.startswith(("shared_", *KEPT_PREFIXES))}
    unknown = {k for k in widget_keys if not k.startswith(state.DATA_CHOICE_PREFIXES)}
    # every key a page set is either a data choice or a shared key named in app.state
    named = {v for k, v in vars(state).items() if k.isupper() and isinstance(v, str)}
    assert unknown <= named, sorted(unknown - named)
    assert any(k.startswith("perf_") for k in before) and any(k.startswith("cr_") for k in before)
    _open_upload(at, *_short_file(tmp_path))
    left = {k for k in at.session_state if isinstance(k, str)}
    assert not [k for k in left if k.startswith(state.DATA_CHOICE_PREFIXES)]
    assert not set(state.DATA_CHOICE_KEYS) & left
    # and every page works on the new data as in a fresh session
    _use_short_file_roles(at)
    for page in PAGES:
        at.switch_page(f"views/{page}.py").run()
        assert not at.exception, (page, [e.message for e in at.exception])
        assert not at.error, (page, [e.value for e in at.error])
