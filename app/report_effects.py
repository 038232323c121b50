"""The report's sections for the Cox model's variants and for subgroups: the robust standard
errors, each spline with its test and figure, the model refitted on follow-up split at times with
its repeated proportional-hazards check, and the subgroup table, forest figure and caution.

Each takes its part of the command line's JSON and returns an HTML fragment ("" when not run);
``figures`` are built here from the same JSON, so the report needs nothing else.
"""

from __future__ import annotations

from collections.abc import Mapping

import pandas as pd

from app.report_html import (
    cell,
    escape,
    figure_block,
    interval,
    not_computed_block,
    num,
    or_reason,
    statistics_table,
    table,
)
from app.report_sections import ph_check_rows
from engine.analysis.run import is_not_computed
from engine.wording import format_number, format_p, format_plain, format_ratio

REPORT_SIZE = (640, 360)


def _term_rows(terms) -> list[list[str]]:
    rows = []
    for term in terms:
        label = term["variable"]
        if term["level"] is not None:
            label = f"{label}: {term['level']}"
        rows.append(
            [
                cell(label),
                num(term["hazard_ratio"], format_ratio(term["hazard_ratio"])),
                interval(term["lower"], term["upper"], format_ratio),
                num(term["p_value"], format_p(term["p_value"])),
            ]
        )
    return rows


def spline_figure(spline: Mapping):
    from app import charts, charts_models

    style = charts.ChartStyle(width=REPORT_SIZE[0], height=REPORT_SIZE[1]).titled(
        "", str(spline["variable"]), "Hazard ratio (log scale)"
    )
    chart = charts_models.spline_chart(
        pd.DataFrame(spline["curve"]), style, knots=spline["knots"], reference=spline["reference"]
    )
    return charts.finish(chart, style)


def model_variants_section(cox: Mapping | None, ci: str) -> str:
    """Robust errors, splines and the split model, or "" when none of them was asked for."""
    if not cox or is_not_computed(cox):
        return ""
    parts = []
    if cox.get("variance") == "robust":
        parts.append(
            f"<p>Standard errors, intervals and p-values of the Cox model are robust (sandwich, "
            f"clustered by subject: {int(cox['clusters']):,} clusters), because a subject has "
            "several rows. The likelihood-ratio tests and the proportional-hazards checks are "
            "model-based.</p>"
        )
    splines = cox.get("splines") or ()
    if is_not_computed(splines):
        parts.append(not_computed_block("Non-linear effects", splines, level=3))
        splines = ()
    for spline in splines:
        knots = ", ".join(format_number(k, 4) for k in spline["knots"])
        parts += [
            f"<h3>Non-linear effect of {escape(spline['variable'])}</h3>",
            f'<p class="meta">Restricted cubic spline with {len(spline["knots"])} knots at '
            f"{escape(knots)} (Harrell 2015, §2.4); hazard ratios against "
            f"{escape(format_number(spline['reference'], 4))}.</p>",
            statistics_table(
                [
                    ("Non-linearity", spline["nonlinearity"]),
                    ("Whole effect", spline["association"]),
                ],
                "Likelihood-ratio test",
            ),
            figure_block(
                spline_figure(spline),
                f"Hazard ratio by {spline['variable']} with its {ci} pointwise band; marks along "
                "the bottom are the knots.",
            ),
        ]
    split = cox.get("time_split")
    if is_not_computed(split):
        parts.append(not_computed_block("Follow-up split", split, level=3))
    elif split:
        times = ", ".join(format_plain(t) for t in split["times"])
        model = split["model"]
        parts += [
            f"<h3>Follow-up split at {escape(times)}</h3>",
            f'<p class="meta">{int(split["episodes"]):,} episodes; effects allowed to change: '
            f"{escape(', '.join(split['changing']) or 'none (the same model)')}.</p>",
            table(["Term", "Hazard ratio", f"{ci} CI", "p"], _term_rows(model["terms"])),
            "<h4>Proportional-hazards check after the split</h4>",
            statistics_table(ph_check_rows(model["ph_check"]), "Variable"),
        ]
    if not parts:
        return ""
    return "\n".join(["<h2>The Cox model's variants</h2>", *parts])


def subgroup_figure(section: Mapping):
    from app import charts, charts_models

    rows = pd.DataFrame([section["overall"], *section["rows"]])
    rows["label"] = [
        ("All subjects" if r["variable"] is None else f"{r['variable']}: {r['level']}")
        + f" (n {r['n']:,}, {r['events']:,} events)"
        for r in [section["overall"], *section["rows"]]
    ]
    rows = rows.assign(is_reference=False, p_text=rows["p_value"].map(format_p))
    rows = rows.dropna(subset=["hazard_ratio", "lower", "upper"])
    style = charts.ChartStyle(width=REPORT_SIZE[0], height=REPORT_SIZE[1])
    return charts.finish(charts_models.forest_chart(rows, style), style)


@or_reason("Subgroup effects")
def subgroups_section(section: Mapping | None, ci: str) -> str:
    if not section:
        return ""
    rows = []
    for r in [section["overall"], *section["rows"]]:
        name = "All subjects" if r["variable"] is None else f"{r['variable']}: {r['level']}"
        rows.append(
            [
                cell(name),
                num(r["n"], f"{r['n']:,}"),
                num(r["events"], f"{r['events']:,}"),
                num(r["hazard_ratio"], format_ratio(r["hazard_ratio"])),
                interval(r["lower"], r["upper"], format_ratio),
                num(r["p_value"], format_p(r["p_value"])),
                cell(r["note"] or ""),
            ]
        )
    return "\n".join(
        [
            f"<h2>Subgroup effects: {escape(section['treatment'])}</h2>",
            f'<p class="caution">{escape(section["caution"])}</p>',
            table(
                ["Subgroup", "Subjects", "Events", "Hazard ratio", f"{ci} CI", "p", "Note"], rows
            ),
            figure_block(
                subgroup_figure(section), f"Hazard ratios within each subgroup ({ci} intervals)."
            ),
            "<h3>Interaction tests (does the effect differ between levels?)</h3>",
            statistics_table([(t["variable"], t) for t in section["interactions"]], "Column"),
        ]
    )
