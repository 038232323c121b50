"""Manuscript sentences: exact strings for fixed inputs, and the rounding edge cases.

The expected strings are written out by hand from the rounding rules in engine/wording.py's
docstring (half-up on the printed decimal value), not produced by the code under test.
"""

from __future__ import annotations

import math
from decimal import Decimal

import pytest
from hypothesis import given
from hypothesis import strategies as st

from engine.wording import (
    comparison_sentence,
    cox_sentences,
    curve_sentences,
    format_confidence,
    format_number,
    format_p,
    format_percent,
    format_plain,
    format_ratio,
    hazard_ratio_sentence,
    median_sentence,
    p_clause,
    rmst_sentence,
    survival_at_sentence,
)


@pytest.mark.parametrize(
    ("p", "expected"),
    [
        (0.0, "< 0.001"),
        (1.2e-12, "< 0.001"),
        (0.0009999, "< 0.001"),  # would round to 0.001 but is below it
        (0.001, "0.001"),
        (0.0014999, "0.001"),
        (0.0015, "0.002"),  # half-up on the decimal, not banker's rounding
        (0.0125, "0.013"),  # 0.0125 is 0.01249999... as a binary float
        (0.0495, "0.050"),
        (0.04949, "0.049"),
        (0.5, "0.500"),
        (0.9994, "0.999"),
        (0.9996, "> 0.999"),  # never print 1.000 for p below 1
        (1.0, "1.000"),
        (None, "not estimable"),
        (math.nan, "not estimable"),
    ],
)
def test_format_p(p, expected):
    assert format_p(p) == expected


@pytest.mark.parametrize(
    ("p", "expected"),
    [
        (0.0312, "p = 0.031"),
        (0.00002, "p < 0.001"),
        (0.99999, "p > 0.999"),
        (None, "p not estimable"),
    ],
)
def test_p_clause_has_no_equals_before_an_inequality(p, expected):
    assert p_clause(p) == expected


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (2.345, "2.35"),  # 2.345 is 2.34499... as a float; half-up on the decimal gives 2.35
        (0.105, "0.11"),
        (0.1, "0.10"),
        (0.0994, "0.099"),  # below 0.1: two significant figures
        (0.0996, "0.10"),  # rounds up into the two-decimal range
        (0.047, "0.047"),
        (0.00123, "0.0012"),
        (12.0, "12.00"),
        (math.inf, "infinite"),
        (None, "not estimable"),
    ],
)
def test_format_ratio(value, expected):
    assert format_ratio(value) == expected


@pytest.mark.parametrize(
    ("value", "digits", "expected"),
    [
        (0.05, 1, "0.1"),
        (0.15, 1, "0.2"),
        (2.25, 1, "2.3"),
        (-0.04, 1, "0.0"),  # no "-0.0"
        (-1.25, 1, "-1.3"),  # half away from zero
        (7, 0, "7"),
        (None, 1, "not estimable"),
    ],
)
def test_format_number(value, digits, expected):
    assert format_number(value, digits) == expected


def test_small_formatters():
    assert format_percent(0.64321) == "64.3%"
    assert format_percent(0.0005) == "0.1%"
    assert format_percent(1.0) == "100.0%"
    assert format_percent(0.00125) == "0.1%"
    assert format_percent(0.57125) == "57.1%"
    assert format_percent(0.57151) == "57.2%"
    assert format_percent(0.5715) == "57.2%"  # half-up
    assert format_percent(0.10335) == "10.3%"
    assert format_percent(0.10335, digits=2) == "10.34%"  # 0.10335 * 100 is 10.33499... in floats
    assert format_plain(12.0) == "12"
    assert format_plain(2.5) == "2.5"
    assert format_plain(100) == "100"
    assert format_confidence(0.95) == "95%"
    assert format_confidence(0.975) == "97.5%"
    assert format_confidence(0.9) == "90%"


def test_median_sentence():
    assert (
        median_sentence(23.0, 16.0, None, "weeks")
        == "Median survival was 23.0 weeks (95% CI 16.0 to not reached)."
    )
    assert (
        median_sentence(8.0, 4.0, 11.0, "weeks", group="placebo")
        == "Median survival in group placebo was 8.0 weeks (95% CI 4.0 to 11.0)."
    )
    assert (
        median_sentence(None, 30.25, None, "months", confidence=0.9)
        == "Median survival was not reached (90% CI 30.3 to not reached)."
    )


def test_survival_at_sentence():
    assert (
        survival_at_sentence(12, 0.64321, 0.55125, 0.72, "months", at_risk=48)
        == "Survival at 12 months was 64.3% (95% CI 55.1% to 72.0%), with 48 still at risk."
    )
    assert survival_at_sentence(1, 0.5, 0.4, 0.6, "years") == (
        "Survival at 1 year was 50.0% (95% CI 40.0% to 60.0%)."
    )
    assert survival_at_sentence(2.5, 0.8571, 0.6197, 0.9516, "years", group="6-MP") == (
        "Survival at 2.5 years in group 6-MP was 85.7% (95% CI 62.0% to 95.2%)."
    )


def test_hazard_ratio_sentences():
    assert (
        hazard_ratio_sentence(0.6234, 0.4501, 0.8512, 0.0031, "treatment", "B", "A")
        == "The hazard ratio for treatment B versus A was 0.62 (95% CI 0.45 to 0.85; p = 0.003)."
    )
    assert hazard_ratio_sentence(1.0234, 1.0101, 1.0405, 4e-5, "age") == (
        "The hazard ratio for each one-unit increase in age was 1.02 "
        "(95% CI 1.01 to 1.04; p < 0.001)."
    )
    assert hazard_ratio_sentence(
        1.4, 0.9, 2.2, 0.12, "weight", unit_of_change="10 kg", confidence=0.99
    ) == (
        "The hazard ratio for each 10 kg increase in weight was 1.40 "
        "(99% CI 0.90 to 2.20; p = 0.120)."
    )


def test_comparison_sentence():
    # Freireich 6-MP vs placebo log-rank chi-squared 16.79 on 1 df (see the curves issue)
    assert comparison_sentence("log-rank", 16.7929, 1, 4.17e-5) == (
        "Log-rank test: chi-squared 16.79 on 1 degree of freedom, p < 0.001."
    )
    assert comparison_sentence("Tarone–Ware", 3.4449, 2, 0.17866) == (
        "Tarone–Ware test: chi-squared 3.44 on 2 degrees of freedom, p = 0.179."
    )
    assert comparison_sentence("trend", 1.0, None, 0.3173) == (
        "Trend test: statistic 1.00, p = 0.317."
    )


def test_rmst_sentence():
    assert rmst_sentence(18.25, 16.94, 19.55, 24, "months") == (
        "Restricted mean survival time to 24 months was 18.3 months (95% CI 16.9 to 19.6)."
    )


@given(st.floats(min_value=0.0, max_value=1.0, allow_nan=False))
def test_format_p_is_never_a_bare_zero_or_a_false_one(p):
    text = format_p(p)
    assert text not in {"0.000", "-0.000"}
    if p < 1:
        assert text != "1.000"
    if p < 0.001:
        assert text == "< 0.001"


@given(st.floats(min_value=1e-6, max_value=1e6, allow_nan=False))
def test_format_ratio_keeps_two_significant_figures_or_more(value):
    text = format_ratio(value)
    digits = text.replace(".", "").lstrip("0")
    assert len(digits) >= 2
    assert float(text) == pytest.approx(value, rel=0.06)


def test_curve_sentences_from_a_json_entry():
    entry = {
        "group": "6-MP",
        "n": 21,
        "events": 9,
        "median": {"estimate": 23.0, "lower": 13.0, "upper": None},
        "at_times": [
            {"time": 10.0, "survival": 0.75294, "lower": 0.5032, "upper": 0.88936, "at_risk": 15}
        ],
    }
    assert curve_sentences(entry, "weeks") == [
        "Median survival in group 6-MP was 23.0 weeks (95% CI 13.0 to not reached).",
        "Survival at 10 weeks in group 6-MP was 75.3% (95% CI 50.3% to 88.9%), "
        "with 15 still at risk.",
    ]
    overall = {**entry, "group": None, "at_times": []}
    assert curve_sentences(overall, "weeks", 0.9) == [
        "Median survival was 23.0 weeks (90% CI 13.0 to not reached)."
    ]


def test_cox_sentences_from_the_json_object():
    cox = {
        "terms": [
            {"variable": "arm", "level": "B", "reference": "A", "hazard_ratio": 4.5226,
             "lower": 2.0269, "upper": 10.0914, "p_value": 0.000229},
            {"variable": "age", "level": None, "reference": None, "hazard_ratio": 0.995,
             "lower": 0.9713, "upper": 1.0193, "p_value": 0.68375},
        ]
    }  # fmt: skip
    assert cox_sentences(cox) == [
        "The hazard ratio for arm B versus A was 4.52 (95% CI 2.03 to 10.09; p < 0.001).",
        # 0.995 is 0.99499... as a float (round() gives 0.99); the decimal rule gives 1.00
        "The hazard ratio for each one-unit increase in age was 1.00 "
        "(95% CI 0.97 to 1.02; p = 0.684).",
    ]


@pytest.mark.parametrize("value", [1e27, 1e28, 1e308, -1e300, 1.7976931348623157e308])
def test_huge_values_are_worded_in_powers_of_ten_without_error(value):
    """Issue 10 item 4: 1e27 and more used to raise decimal.InvalidOperation (28-digit context)."""
    for text in (
        format_number(value, 1),
        format_ratio(value),
        format_plain(value),
        comparison_sentence("log-rank", value, 1, 0.5),
        median_sentence(value, value, None, "days"),
    ):
        assert "e+" in text
    ratio = Decimal(format_number(value, 2)) / Decimal(repr(value))
    assert abs(ratio - 1) < Decimal("0.01")


def test_values_below_1e15_keep_fixed_decimals_and_tiny_ratios_keep_significant_figures():
    assert format_number(123456789012345.06, 1) == "123456789012345.1"
    assert format_ratio(5e-324) == "4.94e-324"
    assert format_percent(1e300) == "1.00e+302%"
    assert format_p(1e27) == "not estimable"  # no probability
    assert format_p(-0.1) == "not estimable"


def test_labels_with_direction_controls_are_shown_as_codes_in_sentences():
    sentence = median_sentence(12.0, 10.0, 14.0, "days", group="\u202eB")
    assert "\u202e" not in sentence and "group [U+202E]B" in sentence
    hr = hazard_ratio_sentence(0.5, 0.4, 0.6, 0.01, "arm\u2066", "new\x1b[2J", "old")
    assert "\u2066" not in hr and "\x1b" not in hr and "arm[U+2066] new[U+001B][2J" in hr


def test_term_labels_name_the_reference_level():
    from engine.wording import term_label

    assert term_label("lubricant", "dry film", "grease") == "lubricant: dry film vs grease"
    assert term_label("load_kN") == "load_kN"
    assert term_label("arm", "B") == "arm: B"


@pytest.mark.parametrize(
    ("event", "median", "free", "title"),
    [
        (None, "median survival", "survival", "Survival probability"),
        ("death", "median survival", "survival", "Survival probability"),
        (
            "relapse",
            "median time to relapse",
            "probability still free of relapse",
            "Probability still free of relapse",
        ),
    ],
)
def test_the_event_is_named_in_words(event, median, free, title):
    from engine.wording import free_name, median_name, probability_title

    assert median_name(event) == median
    assert free_name(event) == free
    assert probability_title(event) == title


def test_curve_sentences_name_the_event_and_the_landmark():
    curve = {
        "group": "A",
        "median": {"estimate": 5.0, "lower": 3.0, "upper": None},
        "at_times": [{"time": 12, "survival": 0.643, "lower": 0.551, "upper": 0.72, "at_risk": 48}],
    }
    sentences = curve_sentences(curve, "months", event="relapse", after="after the landmark")
    assert sentences == [
        "Median time to relapse after the landmark in group A was 5.0 months "
        "(95% CI 3.0 to not reached).",
        "Probability still free of relapse at 12 months after the landmark in group A was 64.3% "
        "(95% CI 55.1% to 72.0%), with 48 still at risk.",
    ]


@pytest.mark.parametrize(("ratio", "words"), [(0.7, "fewer events"), (1.4, "more events")])
def test_planned_hazard_ratio_states_its_direction(ratio, words):
    from engine.wording import hazard_ratio_direction

    text = hazard_ratio_direction(ratio)
    assert "experimental group's hazard divided by the control group's" in text
    assert f"{words} in the experimental group" in text


@given(st.floats(min_value=-1e9, max_value=1e9, allow_nan=False), st.integers(0, 4))
def test_format_nonzero_never_writes_a_non_zero_value_as_zero(value, digits):
    from engine.wording import format_nonzero

    text = format_nonzero(value, digits)
    if value != 0:
        assert float(text) != 0, (value, text)
        # within half a unit of the last digit shown, or 2 significant figures
        assert abs(float(text) - value) <= max(0.5 * 10**-digits, abs(value) * 0.05) + 1e-12


@pytest.mark.parametrize(
    ("value", "figures", "expected"),
    [(0.0048, 2, "0.0048"), (0.0996, 2, "0.10"), (0.00995, 2, "0.010"), (123456.0, 3, "123456"),
     (1.234, 2, "1.2"), (0.0, 2, "0"), (-0.000123, 2, "-0.00012"), (2.5e-7, 2, "2.50e-07")],
)  # fmt: skip
def test_format_significant(value, figures, expected):
    from engine.wording import format_significant

    assert format_significant(value, figures) == expected
