"""The command line's text summary meets null values (issue 10, item 4: TypeError before)."""

from __future__ import annotations

from app.cli_text import analysis_summary


def test_null_statistics_and_aic_are_written_as_not_available():
    sections = {
        "curves": [
            {
                "group": None,
                "n": 3,
                "events": 0,
                "median": {"estimate": None, "lower": None, "upper": None},
                "at_times": [],
            }
        ],
        "comparison": {"test": "log-rank", "statistic": None, "df": 1, "p_value": None},
        "cox": {
            "ties": "efron",
            "n": 3,
            "events": 0,
            "terms": [],
            "likelihood_ratio": None,
            "concordance": None,
            "warnings": [],
        },
        "parametric": {
            "aic_table": [
                {"group": None, "distribution": "weibull", "aic": None, "delta_aic": None}
            ]
        },
        "landmark": {
            "landmark": 2.0,
            "n_kept": 1,
            "n_excluded": 2,
            "comparison": {"test": "log-rank", "statistic": None, "df": None, "p_value": None},
        },
    }
    text = analysis_summary(sections, "days")
    assert "log-rank: chi-square n/a on 1 df, p = n/a" in text
    assert "likelihood ratio n/a on n/a df, p = n/a" in text
    assert "weibull      AIC n/a (Δ n/a)" in text
