"""``python -m app analyze``: the curves, comparison and Cox sections of the schema-2 JSON.

The published values are checked through the command line on the Freireich et al. (1963)
leukaemia remission data (6-MP vs placebo, weeks; as published in Gehan 1965 and reproduced in
Klein & Moeschberger, *Survival Analysis*, 2nd ed., 2003): log-rank chi-square 16.79 on 1 df,
Gehan–Breslow 13.46, medians 23 and 8 weeks, 6-MP S(13) = 0.690 (values from memory, confirmed
by the engine tests against statsmodels), and the treatment-only Cox coefficient 1.572 (Efron) /
1.509 (Breslow), confirmed with statsmodels' PHReg in tests/engine/test_cox.py.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from engine.cox.fit import fit_cox
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles
from engine.survival.compare import compare_frame

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo_data"

SIX_MP = "6,6,6,6+,7,9+,10,10+,11+,13,16,17+,19+,20+,22,23,25+,32+,32+,34+,35+"
PLACEBO = "1,1,2,2,3,4,4,5,5,8,8,8,8,11,11,12,12,15,17,22,23"


def run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "app", *args], cwd=ROOT, capture_output=True, text=True, timeout=180
    )


@pytest.fixture
def freireich_csv(tmp_path) -> Path:
    rows = []
    for arm, text in (("6-MP", SIX_MP), ("placebo", PLACEBO)):
        for item in text.split(","):
            rows.append(
                {"arm": arm, "weeks": float(item.rstrip("+")), "relapse": int("+" not in item)}
            )
    path = tmp_path / "remission.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def analyze_json(*args: str) -> dict:
    done = run("analyze", *args, "--json", "-")
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


def test_freireich_published_values_through_the_command_line(freireich_csv):
    result = analyze_json(
        str(freireich_csv),
        *("--time", "weeks", "--unit", "weeks", "--event", "relapse", "--group", "arm"),
        *("--times", "13", "--covariates", "arm"),
    )
    assert list(result) == ["schema", "data", "curves", "comparison", "cox", "computed_with"]
    assert result["schema"] == 2
    overall, six_mp, placebo = result["curves"]
    assert overall["group"] is None and overall["n"] == 42 and overall["events"] == 30
    assert (six_mp["group"], placebo["group"]) == ("6-MP", "placebo")
    assert six_mp["median"]["estimate"] == 23 and placebo["median"]["estimate"] == 8
    assert six_mp["at_times"][0]["survival"] == pytest.approx(0.690, abs=5e-4)
    assert six_mp["at_times"][0]["at_risk"] == 12
    comparison = result["comparison"]
    assert comparison["test"] == "log-rank" and comparison["df"] == 1
    assert comparison["statistic"] == pytest.approx(16.79, abs=5e-3)
    cox = result["cox"]
    (term,) = cox["terms"]
    assert (term["variable"], term["level"], term["reference"]) == ("arm", "placebo", "6-MP")
    assert term["coef"] == pytest.approx(1.572, abs=5e-4)
    assert term["hazard_ratio"] == pytest.approx(math.exp(term["coef"]))
    assert cox["ties"] == "efron" and cox["n"] == 42 and cox["events"] == 30


def test_test_and_ties_options_change_the_method(freireich_csv):
    result = analyze_json(
        str(freireich_csv),
        *("--time", "weeks", "--event", "relapse", "--group", "arm", "--covariates", "arm"),
        *("--test", "gehan-breslow", "--ties", "breslow", "--ph-time-scale", "rank"),
    )
    assert result["comparison"]["statistic"] == pytest.approx(13.46, abs=5e-3)
    assert result["cox"]["ties"] == "breslow"
    assert result["cox"]["terms"][0]["coef"] == pytest.approx(1.509, abs=5e-4)
    check = result["cox"]["ph_check"]
    assert check["time_scale"] == "rank"
    assert [row["variable"] for row in check["terms"]] == ["arm"]
    assert check["all_terms"]["df"] == 1
    assert "without_each" in result["cox"] and "drop_one" not in result["cox"]


def test_numbers_equal_the_engine_on_a_demo_file():
    args = (
        *("--time", "months_in_service", "--unit", "months", "--event", "failed"),
        *("--group", "supplier", "--covariates", "load_kN,temperature_C,lubricant"),
        *("--reference", "lubricant=oil bath", "--ci-transform", "log", "--confidence", "0.9"),
    )
    result = analyze_json(str(DEMO / "pump_bearings.csv"), *args)
    roles = Roles(
        time="months_in_service",
        unit="months",
        event="failed",
        group="supplier",
        covariates=("load_kN", "temperature_C", "lubricant"),
        reference=(("lubricant", "oil bath"),),
    )
    prepared = prepare(read_table(DEMO / "pump_bearings.csv").frame, roles)
    expected = compare_frame(prepared.frame)
    assert result["comparison"]["statistic"] == pytest.approx(expected.statistic, rel=1e-12)
    assert result["comparison"]["df"] == 3
    model = fit_cox(prepared.frame, list(roles.covariates), categorical=("lubricant",))
    by_term = {(t["variable"], t["level"]): t for t in result["cox"]["terms"]}
    assert {t["reference"] for t in result["cox"]["terms"] if t["level"]} == {"oil bath"}
    frame = model.to_frame().set_index(["variable", "level"])
    for (variable, level), term in by_term.items():
        if level is None:
            assert term["coef"] == pytest.approx(frame.loc[(variable, np.nan), "coef"])
    assert result["cox"]["n"] == model.n
    assert len(result["curves"]) == 5
    assert result["data"]["rows_used"] == 1500


def test_without_group_or_covariates_the_sections_are_null():
    result = analyze_json(
        str(DEMO / "dairy_herd.csv"),
        "--time",
        "weeks",
        "--event",
        "status",
        "--event-value",
        "died",
    )
    assert result["comparison"] is None and result["cox"] is None
    assert [c["group"] for c in result["curves"]] == [None]


def test_text_summary_without_json():
    done = run(
        "analyze",
        str(DEMO / "pump_bearings.csv"),
        *("--time", "months_in_service", "--event", "failed", "--group", "supplier"),
    )
    assert done.returncode == 0, done.stderr
    assert "Log-rank test: chi-squared" in done.stdout and "Kestrel" in done.stdout


def test_text_summary_of_the_model_in_hazels_layout():
    done = run(
        "analyze",
        str(DEMO / "pump_bearings.csv"),
        *("--time", "months_in_service", "--unit", "months", "--event", "failed"),
        *("--covariates", "load_kN,lubricant", "--categorical", "lubricant"),
    )
    assert done.returncode == 0, done.stderr
    out = done.stdout
    # the event named from the roles, medians in words, and the Cox block with its own layout
    assert "median time to failure (interval)" in out
    assert "Cox model (Efron method for tied times):" in out
    assert "hazard ratio   95% CI" in out
    assert "lubricant: dry film vs grease" in out and "lubricant=" not in out
    assert "Tests of the whole model" in out
    for name in ("Likelihood ratio", "Wald", "Score"):
        assert f"    {name}" in out
    assert "Score (log-rank)" not in out and " on 3 df" not in out
    assert "Proportional hazards, all terms together (survival time scale)" in out
    assert "GLOBAL" not in out


@pytest.mark.parametrize(
    "extra, fragment",
    [
        (("--test", "wilcoxon"), "invalid choice"),
        (("--times", "3,abc"), "--times"),
        (("--confidence", "95"), "--confidence"),
        (("--covariates", "no_such_column"), "no_such_column"),
    ],
)
def test_bad_options_exit_2_with_one_line(extra, fragment):
    done = run(
        "analyze",
        str(DEMO / "pump_bearings.csv"),
        *("--time", "months_in_service", "--event", "failed", "--group", "supplier"),
        *extra,
    )
    assert done.returncode == 2
    assert done.stderr.startswith("error: ") and fragment in done.stderr
    assert len(done.stderr.strip().splitlines()) == 1 and "Traceback" not in done.stderr


def test_confidence_option_sets_curve_and_hazard_ratio_intervals(freireich_csv):
    """Interval limits recomputed from the normal quantile (scipy): exp(coef ± z·se)."""
    from scipy.stats import norm

    result = analyze_json(
        str(freireich_csv),
        *("--time", "weeks", "--event", "relapse", "--covariates", "arm", "--confidence", "0.9"),
    )
    (term,) = result["cox"]["terms"]
    z = norm.ppf(0.95)
    assert term["lower"] == pytest.approx(math.exp(term["coef"] - z * term["se"]), rel=1e-9)
    assert term["upper"] == pytest.approx(math.exp(term["coef"] + z * term["se"]), rel=1e-9)


def test_model_intervals_default_to_95_percent_whatever_the_curves_level(freireich_csv):
    """A recipe from the app holds the Curves page's level for curves only; the Regression page
    shows 95% intervals, and so must the replay."""
    from scipy.stats import norm

    from engine.analysis.run import run_analysis

    roles = Roles(time="weeks", unit="weeks", event="relapse", covariates=("arm",))
    prepared = prepare(read_table(freireich_csv).frame, roles)
    sections = run_analysis(prepared, {"curves": {"confidence": 0.9}})
    (term,) = sections["cox"]["terms"]
    z = norm.ppf(0.975)
    assert term["lower"] == pytest.approx(math.exp(term["coef"] - z * term["se"]), rel=1e-9)
