"""`python -m app analyze` with episodes (robust variance), splines, split follow-up, subgroups."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from engine.analysis.run import run_analysis
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles

ROOT = Path(__file__).resolve().parents[2]


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "app", *args], cwd=ROOT, capture_output=True, text=True, timeout=300
    )


@pytest.fixture(scope="module")
def episode_file(tmp_path_factory) -> Path:
    """Invented visits: up to three (start, stop] rows per patient, a lab value per visit."""
    rng = np.random.default_rng(20261202)
    rows = []
    for patient in range(300):
        arm = ["standard", "new"][int(rng.random() < 0.5)]
        age = rng.normal(60, 10)
        start = 0.0
        for _ in range(int(rng.integers(1, 4))):
            lab = rng.normal(5, 1)
            stop = start + np.round(rng.exponential(8 * np.exp(0.3 * (arm == "new"))), 1) + 0.1
            rows.append(
                {
                    "patient": f"P{patient:03d}", "start": start, "stop": stop,
                    "event": int(rng.random() < 0.6), "arm": arm, "age": round(age, 1),
                    "lab": round(lab, 2), "site": ["north", "south", "east"][patient % 3],
                }
            )  # fmt: skip
            start = stop
    path = tmp_path_factory.mktemp("episodes") / "visits.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


ROLES = dict(
    time="stop", entry="start", event="event", id="patient", group="arm",
    covariates=("age", "lab", "site"),
)  # fmt: skip
ROLE_ARGS = (
    "--time", "stop", "--entry", "start", "--event", "event", "--id", "patient", "--group",
    "arm", "--covariates", "age,lab,site",
)  # fmt: skip


def test_episode_options_add_their_sections_with_the_engine_numbers(episode_file, tmp_path):
    out = tmp_path / "out.json"
    done = _run(
        "analyze", str(episode_file), *ROLE_ARGS, "--spline", "age:3", "--spline", "lab",
        "--split-at", "5,10", "--changing", "age", "--subgroups", "site,age",
        "--subgroup-groups", "3", "--json", str(out),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    results = json.loads(out.read_text(encoding="utf-8"))
    cox = results["cox"]
    assert cox["variance"] == "robust" and cox["clusters"] == 300
    assert all(t["se"] != t["se_model"] for t in cox["terms"])
    assert [s["variable"] for s in cox["splines"]] == ["age", "lab"]
    assert len(cox["splines"][0]["knots"]) == 3 and len(cox["splines"][1]["knots"]) == 4
    assert set(cox["splines"][0]) >= {"variable", "knots", "reference", "nonlinearity", "curve"}
    assert set(cox["splines"][0]["curve"][0]) == {"x", "hazard_ratio", "lower", "upper"}
    assert cox["time_split"]["periods"] == ["up to 5", "5 to 10", "after 10"]
    assert cox["time_split"]["model"]["terms"][0]["variable"] == "age, up to 5"
    assert len(results["subgroups"]["rows"]) == 3 + 3
    assert {t["variable"] for t in results["subgroups"]["interactions"]} == {"site", "age"}
    prepared = prepare(read_table(episode_file).frame, Roles(**ROLES))
    expected = run_analysis(
        prepared,
        {
            "cox": {
                "splines": [{"variable": "age", "knots": 3}, {"variable": "lab", "knots": 4}],
                "split": {"times": [5.0, 10.0], "changing": ["age"]},
            },
            "subgroups": {"variables": ["site", "age"], "groups": 3},
        },
    )
    assert results["cox"] == json.loads(json.dumps(expected["cox"]))
    assert results["subgroups"] == json.loads(json.dumps(expected["subgroups"]))


def test_model_variance_on_request(episode_file):
    done = _run("analyze", str(episode_file), *ROLE_ARGS, "--variance", "model", "--json", "-")
    assert done.returncode == 0, done.stderr
    cox = json.loads(done.stdout)["cox"]
    assert cox["variance"] == "model" and cox["clusters"] is None
    assert all(t["se"] == t["se_model"] for t in cox["terms"])
    assert cox["splines"] == [] and cox["time_split"] is None


@pytest.mark.parametrize(
    ("options", "message"),
    [
        (("--spline", "age:9"), "3 to 7"),
        (("--spline", "age:x"), "whole number"),
        (("--spline", "site"), "categorical"),
        (("--spline", "weight"), "--spline names column(s) 'weight' that the data does not have"),
        (("--spline", "arm"), "not a covariate"),
        (("--changing", "age"), "--changing needs --split-at"),
        (("--split-at", "5", "--changing", "weight"), "--changing names column(s) 'weight'"),
        (("--split-at", "5", "--changing", "arm"), "must be covariates of the model"),
        (("--split-at", "-3"), "positive numbers"),
        (("--split-at", "soon"), "--split-at expects numbers"),
        (("--subgroups", "nowhere"), "'nowhere'"),
        (("--variance", "sandwich"), "invalid choice"),
    ],
)
def test_bad_options_exit_2_with_one_line(episode_file, options, message):
    done = _run("analyze", str(episode_file), *ROLE_ARGS, *options, "--json", "-")
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and message in lines[0]
    assert "Traceback" not in done.stderr


def test_subgroups_need_a_two_level_group(episode_file):
    """Issue 10 item 12: the subgroup section says why; the run and its other sections stand."""
    done = _run(
        "analyze", str(episode_file), "--time", "stop", "--event", "event", "--group", "site",
        "--subgroups", "age", "--json", "-",
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    results = json.loads(done.stdout)
    assert "exactly two levels" in results["subgroups"]["not_computed"]
    assert results["curves"]


def test_report_has_the_variants_and_subgroup_sections(episode_file, tmp_path):
    import html.parser

    report = tmp_path / "report.html"
    done = _run(
        "analyze", str(episode_file), *ROLE_ARGS, "--spline", "age", "--split-at", "5",
        "--subgroups", "site", "--report", str(report), "--json", str(tmp_path / "o.json"),
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    text = report.read_text(encoding="utf-8")
    html.parser.HTMLParser().feed(text)
    assert "<h2>The Cox model's variants</h2>" in text and "Non-linear effect of age" in text
    assert "clustered by subject: 300 clusters" in text
    assert "<h2>Subgroup effects: arm: standard vs new</h2>" in text
    assert "exploratory" in text and text.count("<svg") >= 4


def test_four_clinics_for_four_terms_give_the_model_based_fit(tmp_path):
    """`--id` with 4 distinct values and 4 model terms: before, numpy's LinAlgError (exit 1)."""
    rng = np.random.default_rng(6)
    n = 24
    path = tmp_path / "clinics.csv"
    pd.DataFrame(
        {
            "months": rng.integers(1, 13, n), "died": rng.integers(0, 2, n),
            "age": rng.integers(40, 80, n), "dose": rng.integers(1, 4, n),
            "arm": rng.choice(["A", "B", "C"], n),
            "clinic": np.repeat(["north", "south", "east", "west"], 6),
        }
    ).to_csv(path, index=False)  # fmt: skip
    roles = ("--time", "months", "--event", "died", "--covariates", "age,dose,arm")
    roles += ("--categorical", "arm")
    run = _run("analyze", str(path), *roles, "--id", "clinic", "--json", "-")
    assert run.returncode == 0, run.stderr
    cox = json.loads(run.stdout)["cox"]
    assert cox["variance"] == "model" and cox["clusters"] is None
    assert any("needs more clusters than model terms" in w for w in cox["warnings"])
    plain = _run("analyze", str(path), *roles, "--json", "-")
    expected = json.loads(plain.stdout)["cox"]["terms"]
    assert [t["se"] for t in cox["terms"]] == pytest.approx([t["se"] for t in expected])
