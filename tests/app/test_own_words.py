"""Hazel's output in its own words (issue 11): none of the tokens, labels and layouts it replaced
appears in the command line's text, its JSON, the HTML report or the code of the pages.

One full run on the pump demo (curves by group, comparison, a Cox model with a categorical
covariate, parametric and AFT models, a landmark) gives the text, the JSON and the report; the
page, chart and report modules are read as source.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from app.cli import main

ROOT = Path(__file__).resolve().parents[2]
PUMPS = ROOT / "demo_data" / "pump_bearings.csv"

# Tokens that belonged to other programs' conventions, or that misled (see issue 11).
OLD_TOKENS = (
    "GLOBAL",  # the joint proportional-hazards row: now "All terms together" / all_terms
    "drop_one",  # now without_each
    "ph_transform",
    "--ph-transform",
    "Score (log-rank)",  # now "Score"
    "lognormal",  # now log-normal
    "loglogistic",  # now log-logistic
    "log_rho",
    "log_lambda",
    "log_sigma",
    "log_beta",
    "lambda_",
    "rho_",
    "mu_",
    "sigma_",
    "Number at risk",  # the at-risk table's title: now "Subjects still at risk"
    "chi-square on",
    "Quantile t_p",
    "tau =",
)
BRACKET_TERM = re.compile(r"\b\w+\[[^\]\s]+\]")  # name[level]
EQUALS_LEVEL = re.compile(r"\b(lubricant|supplier)=\S")  # column=level
P_WITHOUT_EQUALS = re.compile(r"\bp 0\.\d")  # "p 0.012"


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    out = tmp_path_factory.mktemp("own_words")
    args = [
        "analyze",
        str(PUMPS),
        *("--time", "months_in_service", "--unit", "months", "--event", "failed"),
        *("--group", "supplier", "--covariates", "load_kN,lubricant", "--categorical", "lubricant"),
        *("--times", "12,24", "--parametric", "--landmark", "6"),
        *("--json", str(out / "result.json"), "--report", str(out / "report.html")),
    ]
    return args, out


def _run(args, capsys) -> str:
    assert main(args) == 0
    captured = capsys.readouterr()
    assert captured.err == ""
    return captured.out


def _assert_own_words(text: str, where: str) -> None:
    for token in OLD_TOKENS:
        assert token not in text, f"{token!r} is still in the {where}"
    for pattern in (BRACKET_TERM, EQUALS_LEVEL, P_WITHOUT_EQUALS):
        found = pattern.search(text)
        assert found is None, f"{found.group(0)!r} is still in the {where}"


def test_cli_text_json_and_report_use_hazels_words(outputs, capsys):
    args, out = outputs
    text = _run(args, capsys)
    _assert_own_words(text, "command line's text")
    result = json.loads((out / "result.json").read_text(encoding="utf-8"))
    _assert_own_words(json.dumps(result, ensure_ascii=False), "JSON")
    report = (out / "report.html").read_text(encoding="utf-8")
    _assert_own_words(report, "report")
    # and the new words are there
    assert result["schema"] == 2
    assert list(result["cox"]["ph_check"]) == ["time_scale", "terms", "all_terms"]
    assert "All terms together" in report and "All terms together" not in json.dumps(result)
    assert "lubricant: dry film vs grease" in text and "lubricant: dry film vs grease" in report
    aft_terms = [c["term"] for c in result["parametric"]["aft"]["coefficients"]]
    assert "lubricant: dry film vs grease" in aft_terms
    assert {r["distribution"] for r in result["parametric"]["aic_table"]} == {
        "exponential",
        "weibull",
        "log-normal",
        "log-logistic",
    }
    assert "Median time to failure" in report  # the event named from the roles
    assert "after the landmark" in report
    assert "Subjects still at risk" in report


PAGE_CODE = sorted(
    {*(ROOT / "app" / "views").glob("*.py")}
    | {ROOT / "app" / name for name in ("charts.py", "charts_models.py", "cli_text.py", "ui.py")}
    | {*(ROOT / "app").glob("report*.py")}
)


@pytest.mark.parametrize("path", PAGE_CODE, ids=lambda p: p.name)
def test_page_and_report_code_holds_none_of_the_old_tokens(path):
    source = path.read_text(encoding="utf-8")
    # ("tau =" is a variable name in code; the outputs above are checked for it)
    code_tokens = [t for t in OLD_TOKENS if t != "tau ="]
    for token in (*code_tokens, "dayfirst", '"km"', '"identity"', "Kaplan–Meier scale"):
        assert token not in source, f"{token!r} is still in {path.relative_to(ROOT)}"
    assert not P_WITHOUT_EQUALS.search(source)
    assert 'shape="diamond"' not in source  # single estimates are not pooled ones
    assert 'orient="top"' not in source  # no legend on top of the curves
