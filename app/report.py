"""One self-contained HTML report of an analysis, to attach to an email or keep with a paper.

The report is built from the same JSON object the command line writes (``schema`` 2: ``data``,
``curves``, ``comparison``, ``cox``) plus figures, so every number in it is one of the JSON's
numbers, rounded by ``engine.wording``'s rules; each numeric cell keeps the exact value in a
``data-value`` attribute. The file loads nothing: the style sheet is inline, figures are inline
SVG (rendered by vl-convert from the app's Altair charts) with every address removed, and every
string that came from the user or the data is HTML-escaped.

This module assembles the document (style sheet, cautions, warnings, methods paragraph); the
per-analysis sections are in ``app.report_sections`` and the HTML building blocks (escaping,
cells and tables, sanitised SVG) in ``app.report_html``.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping, Sequence

from app.report_baseline import baseline_section
from app.report_effects import model_variants_section, subgroups_section
from app.report_html import bullets, escape
from app.report_prediction import performance_section
from app.report_sections import (
    comparison_section,
    competing_section,
    cox_section,
    curves_section,
    data_section,
    landmark_section,
    parametric_section,
    ph_section,
    roles_section,
    sample_size_section,
)
from engine.analysis.recipe import software_versions
from engine.analysis.run import is_not_computed
from engine.cox.diagnostics import TIME_SCALE_WORDS
from engine.prepare.roles import Roles, event_in_words
from engine.wording import format_confidence, format_plain

CAUTIONS = (
    "These results support research and exploration, not decisions about an individual patient.",
    "Important conclusions need review by a qualified statistician.",
    "The data stayed on this computer: Hazel sent nothing anywhere, and this file loads nothing.",
    "Follow your local ethics and data-protection rules before sharing results or data.",
)

TRANSFORM_WORDS = {
    "log-log": "the log-log (complementary log-log) transform",
    "log": "the log transform",
    "linear": "no transform (linear scale, limits clipped to [0, 1])",
}

STYLE = """
:root { --ink: #1F2A2E; --muted: #5F6B6B; --rule: #D5DCDC; --accent: #0B6E69; --soft: #EEF4F3; }
* { box-sizing: border-box; }
body { font-family: Helvetica, Arial, sans-serif; color: var(--ink); margin: 0 auto;
       max-width: 60rem; padding: 1.5rem 2rem 3rem; line-height: 1.45; font-size: 15px; }
header { border-bottom: 3px solid var(--accent); margin-bottom: 1rem; }
h1 { font-size: 1.6rem; margin: 0 0 .3rem; }
h2 { font-size: 1.2rem; margin: 2rem 0 .6rem; color: var(--accent); }
h3 { font-size: 1rem; margin: 1.2rem 0 .4rem; }
.meta { color: var(--muted); font-size: .9rem; margin: 0 0 .8rem; }
.cautions { background: var(--soft); border-left: 4px solid var(--accent); padding: .6rem 1rem;
            margin: 1rem 0; }
.cautions ul { margin: .3rem 0; padding-left: 1.2rem; }
.warnings li { margin: .2rem 0; }
table { border-collapse: collapse; margin: .4rem 0 1rem; font-size: .9rem; }
th, td { padding: .25rem .6rem; border-bottom: 1px solid var(--rule); text-align: left;
         vertical-align: top; }
th { font-weight: 600; border-bottom: 2px solid var(--ink); }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.ci { white-space: nowrap; }
.wide { overflow-x: auto; }
figure { margin: .5rem 0 1rem; overflow-x: auto; }
figure svg { max-width: 100%; height: auto; }
figcaption { color: var(--muted); font-size: .85rem; }
.sentences li { margin: .25rem 0; }
code { font-size: .85rem; }
@media print { body { max-width: none; padding: 0; } h2 { break-after: avoid; } }
"""


# --- methods --------------------------------------------------------------------------------------


def _strata_words(strata) -> str:
    """Words for a strata setting (None: the strata role, shown with the roles)."""
    if strata is False:
        return ", without stratification"
    return f", stratified by {strata}" if strata else ""


def _model_words(settings: Mapping) -> str:
    """The model builder's choices, when they depart from the roles."""
    chosen = settings.get("cox", {})
    words = ""
    if chosen.get("covariates") is not None:
        words += " on " + ", ".join(str(c) for c in chosen["covariates"])
    if chosen.get("strata") is False:
        words += " without strata"
    elif chosen.get("strata"):
        words += f" with a baseline hazard per stratum of {chosen['strata']}"
    return words


def methods_paragraph(results: Mapping, settings: Mapping, software: Mapping[str, str]) -> str:
    """The methods, written from the settings actually used (plain text)."""
    curves = {"ci_transform": "log-log", "confidence": 0.95, **settings.get("curves", {})}
    ci = format_confidence(curves["confidence"])
    transform = TRANSFORM_WORDS.get(curves["ci_transform"], curves["ci_transform"])
    unit = results.get("data", {}).get("time_unit", "")
    text = [
        f"Survival was estimated with the Kaplan–Meier method, with time measured in {unit}. "
        f"Pointwise {ci} confidence intervals used Greenwood's variance with {transform}. "
        "Medians and their intervals were read from the curve and its confidence band "
        "(the first time each falls to 0.5 or below); a median is 'not reached' when the curve "
        "stays above 0.5."
    ]
    data = results.get("data", {})
    if data:
        text.append(
            f"Of {data['rows_read']:,} rows, {data['rows_used']:,} were analysed "
            f"({data['events']:,} events); rows left out are listed by reason under Data."
        )
    comparison = results.get("comparison")
    if comparison and not is_not_computed(comparison):
        df = format_plain(comparison["df"])
        freedom = "degree" if df == "1" else "degrees"
        chosen = settings.get("comparison", {})
        cut, strata = chosen.get("cut"), chosen.get("strata")
        groups = (
            f"{cut['groups']} groups of about equal size cut at the quantiles of {cut['column']}"
            if cut
            else "Groups"
        )
        text.append(
            f"{groups[0].upper()}{groups[1:]} were compared with the {comparison['test']} test "
            f"({df} {freedom} of freedom){_strata_words(strata)}."
        )
    cox = results.get("cox")
    if cox and not is_not_computed(cox):
        ties = cox.get("ties") or settings.get("cox", {}).get("ties", "efron")
        ph = settings.get("cox", {}).get("ph_time_scale", "survival")
        text.append(
            "Hazard ratios were estimated with a Cox proportional-hazards model "
            f"({ties.capitalize()} method for tied event times){_model_words(settings)}, "
            "categorical covariates coded "
            "against their reference level, using complete cases on the model's variables; "
            "intervals and p-values are from Wald statistics. Proportional hazards were checked "
            "with the Grambsch–Therneau test on scaled Schoenfeld residuals against "
            f"{TIME_SCALE_WORDS.get(ph, ph)}."
        )
    names = {"python": "Python", "numpy": "NumPy", "pandas": "pandas", "scipy": "SciPy"}
    versions = ", ".join(f"{names.get(n, n)} {version}" for n, version in software.items())
    text.append(f"Analyses were run in Hazel ({versions}).")
    return " ".join(text)


# --- the report --------------------------------------------------------------------------------


def build_report(
    results: Mapping,
    settings: Mapping,
    *,
    roles: Mapping | None = None,
    title: str = "Survival analysis report",
    figures: Mapping[str, object] | None = None,
    fingerprint: Mapping | None = None,
    filters: Sequence[Mapping] = (),
    warnings: Sequence[str] = (),
    software: Mapping[str, str] | None = None,
    generated: dt.datetime | None = None,
    column_labels: Mapping[str, str] | None = None,
) -> str:
    """The report as one HTML document (a string).

    ``results`` is the command line's JSON object (schema 2), optionally with ``pairwise`` (a
    list of records) beside ``comparison`` and ``rmst`` in curve entries; ``settings`` maps each
    analysis to its settings (``Recipe.settings()``); ``roles`` is ``Roles.to_dict()``;
    ``figures`` may hold ``"curves"`` (the Kaplan–Meier figure with numbers at risk) and
    ``"forest"`` as Altair charts, Vega-Lite dicts or SVG text; ``fingerprint`` is
    ``ImportedTable.fingerprint()`` plus ``file_name``; ``filters`` is
    ``FilterOutcome.to_dict()["excluded"]``; ``warnings`` are extra warnings such as
    fingerprint differences from a replayed recipe; ``column_labels`` the variable labels of an
    SPSS, Stata or SAS file, shown beside the column names.
    """
    figures = dict(figures or {})
    software = dict(software or software_versions())
    generated = generated or dt.datetime.now().astimezone()
    data = results.get("data") or {}
    unit = data.get("time_unit", "")
    confidence = float(settings.get("curves", {}).get("confidence", 0.95))
    cox = results.get("cox")
    event = event_in_words(Roles.from_dict(roles)) if roles else None
    all_warnings = [
        *warnings,
        *data.get("warnings", []),
        *((cox or {}).get("warnings", []) if not is_not_computed(cox) else []),
    ]
    body = [
        "<header>",
        f"<h1>{escape(title)}</h1>",
        f'<p class="meta">Written by Hazel on {escape(generated.strftime("%Y-%m-%d %H:%M %Z"))}.'
        "</p>",
        "</header>",
        '<section class="cautions"><strong>Before you read</strong>',
        bullets(CAUTIONS),
        "</section>",
        data_section(data, fingerprint, filters, results.get("computed_with")) if data else "",
        roles_section(roles, column_labels),
        baseline_section(results.get("baseline"), settings, column_labels),
        curves_section(results.get("curves") or [], unit, confidence, figures.get("curves"), event),
        comparison_section(results.get("comparison"), results.get("pairwise")),
        cox_section(cox, confidence, figures.get("forest")),
        ph_section(cox, figures.get("residuals"), figures.get("residuals_term")),
        competing_section(
            results.get("competing"),
            unit,
            format_confidence(confidence),
            figures.get("competing"),
            figures.get("fine_gray_forest"),
        ),
        parametric_section(
            results.get("parametric"),
            unit,
            format_confidence(confidence),
            figures.get("parametric"),
        ),
        sample_size_section(results.get("sample_size")),
        landmark_section(results.get("landmark"), unit, format_confidence(confidence), event),
        model_variants_section(cox, format_confidence(confidence)),
        subgroups_section(results.get("subgroups"), format_confidence(confidence)),
        performance_section(results.get("performance"), unit, figures.get("calibration")),
        "<h2>Warnings</h2>",
        bullets(all_warnings, "warnings") or "<p>None.</p>",
        "<h2>Methods</h2>",
        f"<p>{escape(methods_paragraph(results, settings, software))}</p>",
        '<section class="cautions"><strong>Cautions</strong>',
        bullets(CAUTIONS),
        "</section>",
    ]
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        # forbid every network load, in case a reader's browser would try one
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        "style-src 'unsafe-inline'; img-src data:\">\n"
        f"<title>{escape(title)}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n"
        + "\n".join(part for part in body if part)
        + "\n</body>\n</html>\n"
    )
