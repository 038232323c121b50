"""Labels as the user wrote them in every message and table: numbers without numpy's reprs and
counts as integers; levels that differ only by an invisible character shown apart (as codes)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from app.cli import main


def test_group_warnings_show_levels_as_written_and_counts_as_integers(tmp_path, capsys):
    rng = np.random.default_rng(0)
    n = 60
    group = np.where(np.arange(n) < 8, 1.5, np.where(np.arange(n) < 11, 2.5, 3.5))
    frame = pd.DataFrame(
        {"t": rng.exponential(10, n).round(1) + 0.1, "e": rng.integers(0, 2, n), "g": group}
    )
    path = tmp_path / "numeric_groups.csv"
    frame.to_csv(path, index=False)
    out = tmp_path / "r.json"
    assert main(["analyze", str(path), "--time", "t", "--event", "e", "--group", "g",
                 "--json", str(out)]) == 0  # fmt: skip
    text = capsys.readouterr().out
    warnings = json.loads(out.read_text())["data"]["warnings"]
    events = int(frame.loc[frame["g"] == 1.5, "e"].sum())  # counted by hand from the frame
    expected = f"Group 1.5 has {events} event(s); with fewer than 10 events"
    assert any(w.startswith(expected) for w in warnings), warnings
    assert "Group 2.5 has only 3 row(s)." in warnings
    assert "np." not in text and "np." not in json.dumps(warnings)


def test_levels_differing_by_an_invisible_character_are_shown_apart(tmp_path, capsys):
    """ "A" and "A" + U+200B (a zero-width space) are two groups: the text table, the report
    (tables and figures) show the second as A[U+200B]; the JSON keeps the label as written."""
    rng = np.random.default_rng(1)
    n = 40
    frame = pd.DataFrame(
        {
            "t": rng.exponential(10, n).round(1) + 0.1,
            "e": rng.integers(0, 2, n),
            "g": np.where(np.arange(n) % 2 == 0, "A", "A\u200b"),
        }
    )
    path = tmp_path / "invisible.csv"
    frame.to_csv(path, index=False)
    out, report = tmp_path / "r.json", tmp_path / "r.html"
    args = ["analyze", str(path), "--time", "t", "--event", "e", "--group", "g"]
    assert main([*args, "--json", str(out), "--report", str(report)]) == 0
    text = capsys.readouterr().out
    rows = [line.split()[0] for line in text.splitlines() if line.startswith("  A")]
    assert "A" in rows and "A[U+200B]" in rows
    assert "\u200b" not in text
    result = json.loads(out.read_text())
    assert [c["group"] for c in result["curves"][1:]] == ["A", "A\u200b"]
    assert any("[U+200B]" in w for w in result["data"]["warnings"])
    html = report.read_text()
    assert "\u200b" not in html.replace("&#8203;", "")
    assert html.count("A[U+200B]") >= 3  # the figure, the summary table, the sentences
    assert "A[U+200B]" in html[html.index("<svg") : html.index("</svg>")]  # the figure
