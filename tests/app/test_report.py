"""The HTML report: valid HTML, nothing external, user text escaped, numbers equal to the JSON's.

Data: Freireich et al. (1963) 6-MP vs placebo remission times as reproduced in Klein &
Moeschberger (2003); the placebo group is given a hostile label to test escaping. The JSON
sections come from the same engine functions the command line uses.
"""

from __future__ import annotations

import datetime as dt
import re
from html.parser import HTMLParser

import altair as alt
import pandas as pd
import pytest

from app.report import build_report, methods_paragraph
from app.report_html import compact_svg, figure_svg, sanitize_svg
from engine.cox.diagnostics import proportional_hazards_test
from engine.cox.fit import cox_json, fit_cox
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles
from engine.survival.summary import comparison_json, curves_json
from engine.wording import format_number, format_p, format_percent, format_ratio, p_clause

HOSTILE = "<script>alert(1)</script>"
# Remission times in weeks, "+" = censored (Klein & Moeschberger 2003, from Gehan 1965).
# fmt: off
SIX_MP = ["6", "6", "6", "6+", "7", "9+", "10", "10+", "11+", "13", "16", "17+", "19+", "20+",
          "22", "23", "25+", "32+", "32+", "34+", "35+"]
PLACEBO = ["1", "1", "2", "2", "3", "4", "4", "5", "5", "8", "8", "8", "8", "11", "11", "12",
           "12", "15", "17", "22", "23"]
# fmt: on
VOID = {"meta", "br", "hr", "img", "input", "link", "col", "area", "base", "wbr", "source"}


def _freireich_csv() -> bytes:
    rows = [f"weeks,relapse,{HOSTILE}"]  # a hostile column name and a hostile group label
    rows += [f"{v.rstrip('+')},{0 if v.endswith('+') else 1},6-MP" for v in SIX_MP]
    rows += [f"{v},1,{HOSTILE}" for v in PLACEBO]
    return "\n".join(rows).encode("utf-8")


ROLES = Roles(
    time="weeks",
    event="relapse",
    group=HOSTILE,
    unit="weeks",
    covariates=(HOSTILE,),
    categorical=(HOSTILE,),
    reference=((HOSTILE, "6-MP"),),
)


@pytest.fixture(scope="module")
def freireich():
    table = read_table(_freireich_csv(), name="remission <b>.csv")
    prepared = prepare(table.frame, ROLES)
    cox = fit_cox(
        prepared.frame,
        [HOSTILE],
        categorical=[HOSTILE],
        reference={HOSTILE: "6-MP"},
        ties="breslow",
    )
    checks = proportional_hazards_test(cox, "rank")
    results = {
        "schema": 2,
        "data": prepared.report.to_dict(),
        "curves": curves_json(prepared.frame, times=[10, 20]),
        "comparison": comparison_json(prepared.frame),
        "cox": cox_json(cox, checks),
    }
    return table, prepared, results


SETTINGS = {
    "curves": {"times": [10, 20], "ci_transform": "log", "confidence": 0.95},
    "comparison": {"test": "logrank"},
    "cox": {"ties": "breslow", "ph_time_scale": "rank"},
}


def _chart(title: str) -> alt.Chart:
    frame = pd.DataFrame({"time": [0, 5, 10], "estimate": [1.0, 0.8, 0.5], "group": [HOSTILE] * 3})
    return (
        alt.Chart(frame)
        .mark_line(interpolate="step-after")
        .encode(x="time:Q", y="estimate:Q", color="group:N")
        .properties(title=title, width=300, height=200)
    )


@pytest.fixture(scope="module")
def report(freireich):
    table, prepared, results = freireich
    return build_report(
        results,
        SETTINGS,
        roles=prepared.roles.to_dict(),
        title=f"Remission {HOSTILE} see https://example.invalid/x",
        figures={"curves": _chart(f"KM {HOSTILE} http://example.invalid"), "forest": _chart("HR")},
        fingerprint={**table.fingerprint(), "file_name": table.source_name},
        filters=[{"filter": f"{HOSTILE} is one of 'x'", "rows": 0}],
        warnings=["The recipe was made on 40 rows; this file has 42 rows."],
        software={"python": "3.11.0", "lifelines": "0.30.3"},
        generated=dt.datetime(2026, 12, 2, 9, 30, tzinfo=dt.UTC),
    )


class _Checker(HTMLParser):
    """Checks that every element closes in order, and collects numeric cells."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.cells: list[tuple[str, str]] = []  # (data-value, shown text)
        self._cell: list | None = None
        self.text: list[str] = []
        self.headings: list[str] = []

    def _check(self, tag, attrs):
        if tag == "script":
            self.errors.append("script element")
        if any(name.startswith("on") for name, _ in attrs):
            self.errors.append(f"event handler on <{tag}>")

    def handle_starttag(self, tag, attrs):
        self._check(tag, attrs)
        if tag == "h2":
            self.headings.append("")
        attributes = dict(attrs)
        if tag == "td" and "data-value" in attributes:
            self._cell = [attributes["data-value"], ""]
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self._check(tag, attrs)  # self-closing (SVG) elements are complete as written

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
            return
        self.stack.pop()
        if tag == "td" and self._cell is not None:
            self.cells.append(tuple(self._cell))
            self._cell = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell[1] += data
        if self.stack and self.stack[-1] == "h2":
            self.headings[-1] += data


@pytest.fixture(scope="module")
def parsed(report):
    checker = _Checker()
    checker.feed(report)
    checker.close()
    return checker


def test_report_is_well_formed_html(report, parsed):
    assert report.startswith("<!DOCTYPE html>")
    assert parsed.errors == []
    assert parsed.stack == []


def test_report_holds_no_address_and_loads_nothing(report):
    assert "http://" not in report
    assert "https://" not in report
    assert not re.search(r"(?i)\b(src|href)\s*=", report)
    assert "url(" not in report
    assert "@import" not in report
    assert "default-src 'none'" in report


def test_user_text_appears_only_escaped(report, parsed):
    assert "<script" not in report.lower()
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in report
    assert "remission &lt;b&gt;.csv" in report
    text = "".join(parsed.text)
    assert HOSTILE in text  # shown to the reader as the literal label
    assert text.count(HOSTILE) >= 8  # title, roles, group rows, sentences, Cox, PH, warnings


def test_every_section_and_the_cautions_are_present(parsed):
    text = "".join(parsed.text)
    assert parsed.headings == [
        "Data",
        "Column roles",
        "Survival curves",
        "Group comparison",
        "Cox proportional-hazards model",
        "Proportional-hazards checks",
        "Warnings",
        "Methods",
    ]
    for caution in (
        "not decisions about an individual patient",
        "qualified statistician",
        "stayed on this computer",
        "ethics and data-protection rules",
    ):
        assert text.count(caution) == 2  # at the top and at the end
    assert "The recipe was made on 40 rows; this file has 42 rows." in text
    assert "fewer than 10 events" in text  # the data check's warning for the 6-MP group


def test_figures_are_inline_svg(report):
    assert report.count("<svg") == 2
    assert "<figure><svg" in report


def test_curve_numbers_equal_the_json_numbers(freireich, parsed):
    results = freireich[2]
    cells = parsed.cells
    for curve in results["curves"]:
        for point in curve["at_times"]:
            assert (repr(point["survival"]), format_percent(point["survival"])) in cells
            assert (str(point["at_risk"]), str(point["at_risk"])) in cells
    medians = {c["group"]: c["median"]["estimate"] for c in results["curves"]}
    # Freireich: 23 weeks on 6-MP, 8 on placebo (Klein & Moeschberger 2003)
    assert medians == {None: 12.0, "6-MP": 23.0, HOSTILE: 8.0}
    assert ("23.0", "23.0") in cells and ("8.0", "8.0") in cells
    text = "".join(parsed.text)
    # the event column is named "relapse", so the sentences name the event
    assert (
        "Median time to relapse in group 6-MP was 23.0 weeks (95% CI 13.0 to not reached)." in text
    )


def test_comparison_and_cox_numbers_equal_the_json_numbers(freireich, parsed):
    results = freireich[2]
    comparison, cox = results["comparison"], results["cox"]
    assert round(comparison["statistic"], 2) == 16.79  # Freireich log-rank (K&M 2003)
    assert (repr(comparison["statistic"]), "16.79") in parsed.cells
    assert (repr(comparison["p_value"]), "< 0.001") in parsed.cells
    (term,) = cox["terms"]
    assert round(term["coef"], 3) == 1.509  # Breslow ties, placebo vs 6-MP (the Cox issue)
    assert (repr(term["coef"]), "1.509") in parsed.cells
    assert (repr(term["hazard_ratio"]), format_ratio(term["hazard_ratio"])) in parsed.cells
    assert format_ratio(term["hazard_ratio"]) == "4.52"
    assert (repr(term["p_value"]), format_p(term["p_value"])) in parsed.cells
    for check in [*cox["ph_check"]["terms"], cox["ph_check"]["all_terms"]]:
        assert (repr(check["statistic"]), format_number(check["statistic"], 2)) in parsed.cells
        assert (repr(check["p_value"]), format_p(check["p_value"])) in parsed.cells
    for test in ("likelihood_ratio", "wald", "score"):
        assert (repr(cox[test]["statistic"]), format_number(cox[test]["statistic"], 2)) in (
            parsed.cells
        )
    text = "".join(parsed.text)
    lower, upper = format_ratio(term["lower"]), format_ratio(term["upper"])
    assert (
        f"The hazard ratio for {HOSTILE} {HOSTILE} versus 6-MP was 4.52 "
        f"(95% CI {lower} to {upper}; {p_clause(term['p_value'])})." in text
    )
    assert f"Harrell's concordance: {format_number(cox['concordance'], 3)} (SE " in text


def test_methods_follow_the_settings_actually_used(freireich):
    results = freireich[2]
    text = methods_paragraph(results, SETTINGS, {"python": "3.11.0", "lifelines": "0.30.3"})
    assert "Kaplan–Meier" in text
    assert "Pointwise 95% confidence intervals used Greenwood's variance with the log " in text
    assert "log-rank test (1 degree of freedom)" in text
    assert "Breslow method for tied event times" in text
    assert "against the ranks of the event times" in text
    assert "Python 3.11.0, lifelines 0.30.3" in text
    other = methods_paragraph(
        {"data": results["data"]}, {"curves": {"ci_transform": "linear", "confidence": 0.9}}, {}
    )
    assert "90% confidence intervals" in other and "no transform" in other
    assert "Cox" not in other and "compared" not in other


def test_methods_name_the_page_choices_a_recipe_keeps(freireich):
    results = freireich[2]
    settings = {
        **SETTINGS,
        "comparison": {"test": "logrank", "cut": {"column": "age", "groups": 3}, "strata": False},
        "cox": {"ties": "efron", "covariates": ["age"], "strata": "site"},
    }
    text = methods_paragraph(results, settings, {})
    assert "3 groups of about equal size cut at the quantiles of age were compared" in text
    assert "(1 degree of freedom), without stratification." in text
    assert "tied event times) on age with a baseline hazard per stratum of site," in text
    plain = methods_paragraph(results, SETTINGS, {})
    assert "Groups were compared" in plain and "stratif" not in plain
    assert "times) on " not in plain and "per stratum" not in plain


def test_report_without_optional_sections(freireich):
    results = {"schema": 1, "data": freireich[2]["data"], "curves": freireich[2]["curves"][:1]}
    text = build_report(results, {"curves": {}}, software={"python": "3.11"})
    assert "Group comparison" not in text and "Cox" not in text
    assert "<svg" not in text


def test_svg_sanitiser_removes_addresses_scripts_and_handlers():
    svg = (
        '<?xml version="1.0"?><svg xmlns="http://www.w3.org/2000/svg" '
        'xmlns:xlink="http://www.w3.org/1999/xlink" onload="steal()">'
        '<image xlink:href="https://tracker.invalid/p.png" href="//cdn.invalid/x"/>'
        "<script>alert(1)</script><text style=\"fill:url('https://x.invalid/#a')\">"
        "see https://example.invalid</text></svg>"
    )
    clean = sanitize_svg(svg)
    assert "http://" not in clean and "https://" not in clean and "//cdn" not in clean
    assert "<script" not in clean and "onload" not in clean and "<?xml" not in clean
    assert clean.startswith("<svg")
    assert "see https:&#8203;//example.invalid" in clean


def test_compact_svg_drops_only_invisible_marks_and_per_mark_labels():
    svg = (
        '<svg width="10"><path d="M0,0" opacity="0" aria-label="time: 1; estimate: 0.9"/>'
        '<path d="M1,1" opacity="0.16"/><path d="M2,2"/>'
        '<g role="graphics-object" aria-roledescription="group mark container"></g></svg>'
    )
    assert compact_svg(svg) == (
        '<svg role="img" width="10"><path d="M1,1" opacity="0.16"/><path d="M2,2"/><g></g></svg>'
    )


def test_figures_with_more_than_five_thousand_rows_are_drawn():
    # Altair refuses more than 5,000 rows by default; thinned curves of several groups pass it
    frame = pd.DataFrame({"time": range(6000), "estimate": [1 - i / 6000 for i in range(6000)]})
    chart = alt.Chart(frame).mark_line().encode(x="time:Q", y="estimate:Q")
    before = alt.data_transformers.options.get("max_rows", 5000)
    assert figure_svg(chart).startswith('<svg role="img"')
    # the process-wide setting is what it was (the app's charts module may have lifted it)
    assert alt.data_transformers.options.get("max_rows", 5000) == before


def test_pairwise_records_are_tabled_with_p_values_and_escaped_labels(freireich):
    results = {
        **freireich[2],
        "pairwise": [
            {"group_a": "6-MP", "group_b": HOSTILE, "statistic": 16.7929, "p_value": 4.17e-5,
             "p_holm": 0.0213, "pairs": 3},
        ],
    }  # fmt: skip
    text = build_report(results, SETTINGS, software={"python": "3.11"})
    assert "<h3>Pairwise comparisons</h3>" in text
    assert "<th>Against</th>" in text and "<th>p (Holm)</th>" in text
    assert '<td class="num" data-value="0.0213">0.021</td>' in text
    assert '<td class="num" data-value="16.7929">16.79</td>' in text
    assert '<td class="num" data-value="3">3</td>' in text  # whole numbers stay whole
    assert "<td>&lt;script&gt;alert(1)&lt;/script&gt;</td>" in text


def test_rmst_columns_appear_when_the_curves_carry_them(freireich):
    curves = [
        {**c, "rmst": {"estimate": 17.25, "lower": 14.04, "upper": 20.46, "tau": 23.0}}
        for c in freireich[2]["curves"]
    ]
    text = build_report({**freireich[2], "curves": curves}, SETTINGS, software={})
    # no roles: no event name; the horizon is in the header
    assert "<th>Restricted mean survival time to 23 (weeks)</th>" in text
    assert '<td class="num" data-value="17.25">17.3</td><td class="ci">14.0 to 20.5</td>' in text


def test_fine_gray_block_names_the_variance_its_table_uses():
    """Four terms for three events of the cause: the sandwich is singular, the table's errors
    are model-based and the report says so (it said "robust" whatever the fit used)."""
    import numpy as np

    from app.report_prediction import competing_regression_block
    from engine.competing.fine_gray import fit_fine_gray
    from tests.engine.test_fine_gray import runaway_frame

    frame = runaway_frame()
    rng = np.random.default_rng(3)
    time = rng.exponential(10, 200)
    usual = pd.DataFrame(
        {
            "_time": time, "x": rng.normal(size=200),
            "_cause": rng.choice(["a", "b", None], 200, p=[0.4, 0.3, 0.3]),
        }
    )  # fmt: skip
    fits = (
        (fit_fine_gray(frame, ["x", "y", "s"], "a", categorical=["s"]), "model-based"),
        (fit_fine_gray(usual, ["x"], "a"), "robust (sandwich)"),
    )
    for result, words in fits:
        html = competing_regression_block(
            {"fine_gray": {**result.to_dict(), "meaning": "reading"}}, "months", "95%", None
        )
        assert f"{words} standard errors" in html
