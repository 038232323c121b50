"""The report's sections, one per analysis: data, column roles, curves, comparison, Cox model,
proportional-hazards checks, competing risks, parametric models, sample size and landmark.

Each takes its part of the command line's JSON (schema 1) and returns an HTML fragment, or ""
when the analysis was not run; ``app.report.build_report`` puts them in order.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from app.report_html import (
    bullets,
    cell,
    escape,
    estimate_cells,
    figure_block,
    group_label,
    interval,
    num,
    record_rows,
    statistics_table,
    table,
)
from engine.wording import (
    NOT_REACHED,
    comparison_sentence,
    cox_sentences,
    curve_sentences,
    format_confidence,
    format_number,
    format_p,
    format_percent,
    format_plain,
    format_ratio,
)

ROLE_WORDS = (
    ("time", "Time"),
    ("start", "Start date"),
    ("end", "End date"),
    ("unit", "Time unit"),
    ("event", "Event"),
    ("event_values", "Values meaning the event"),
    ("group", "Group"),
    ("covariates", "Covariates"),
    ("categorical", "Categorical covariates"),
    ("reference", "Reference levels"),
    ("strata", "Strata"),
    ("entry", "Entry time"),
    ("id", "Subject id"),
)


# --- sections ----------------------------------------------------------------------------------


def data_section(data: Mapping, fingerprint: Mapping | None, filters: Sequence[Mapping]) -> str:
    unit = data.get("time_unit", "")
    parts = ["<h2>Data</h2>"]
    if fingerprint:
        parts.append(
            '<p class="meta">File '
            + escape(fingerprint.get("file_name") or "(unnamed)")
            + f", {int(fingerprint['rows']):,} rows and {len(fingerprint['columns'])} columns; "
            + "SHA-256 <code>"
            + escape(fingerprint["sha256"])
            + "</code>.</p>"
        )
    counts = [
        ("Rows read", data["rows_read"]),
        ("Rows used", data["rows_used"]),
        ("Events", data["events"]),
        ("Censored", data["censored"]),
    ]
    parts.append(
        table(
            ["", "Count"],
            ([cell(name), num(value, f"{value:,}")] for name, value in counts),
        )
    )
    parts.append(f"<p>Times are in {escape(unit)}.</p>")
    if filters:
        parts.append("<h3>Rows left out by filters (before the data checks)</h3>")
        parts.append(
            table(
                ["Filter", "Rows"],
                ([cell(f["filter"]), num(f["rows"], f"{f['rows']:,}")] for f in filters),
            )
        )
    excluded = data.get("excluded", [])
    parts.append("<h3>Rows left out by the data checks</h3>")
    if excluded:
        parts.append(
            table(
                ["Reason", "Rows"],
                ([cell(e["reason"]), num(e["rows"], f"{e['rows']:,}")] for e in excluded),
            )
        )
    else:
        parts.append("<p>None: every row read was used.</p>")
    return "\n".join(parts)


def roles_section(roles: Mapping | None) -> str:
    if not roles:
        return ""
    rows = []
    for key, words in ROLE_WORDS:
        value = roles.get(key)
        if value in (None, "", [], ()):
            continue
        if key == "reference":
            value = ", ".join(f"{column} = {level}" for column, level in value)
        elif isinstance(value, list | tuple):
            value = ", ".join(str(v) for v in value)
        rows.append([cell(words), cell(value)])
    return "<h2>Column roles</h2>\n" + table(["Role", "Column or value"], rows)


def curves_section(curves: Sequence[Mapping], unit: str, confidence: float, figure) -> str:
    if not curves:
        return ""
    ci = format_confidence(confidence)
    times = [p["time"] for p in curves[0].get("at_times", [])]
    headers = ["Group", "n", "Events", "Censored", "Median", f"{ci} CI"]
    for t in times:
        headers += [f"Survival at {format_plain(t)} {unit}", f"{ci} CI", "At risk"]
    has_rmst = any(c.get("rmst") for c in curves)
    if has_rmst:
        headers += ["RMST", f"{ci} CI"]
    rows, sentences = [], []
    for c in curves:
        median = c["median"]
        row = [
            cell(group_label(c["group"])),
            num(c["n"], f"{c['n']:,}"),
            num(c["events"], f"{c['events']:,}"),
            num(c["n"] - c["events"], f"{c['n'] - c['events']:,}"),
            num(median["estimate"], format_number(median["estimate"], missing=NOT_REACHED)),
            interval(
                median["lower"], median["upper"], lambda v: format_number(v, missing=NOT_REACHED)
            ),
        ]
        sentences += curve_sentences(c, unit, confidence)
        for point in c.get("at_times", []):
            row += [
                num(point["survival"], format_percent(point["survival"])),
                interval(point["lower"], point["upper"], format_percent),
                num(point["at_risk"], f"{point['at_risk']:,}"),
            ]
        if has_rmst:
            rmst = c.get("rmst") or {}
            row += [
                num(rmst.get("estimate"), format_number(rmst.get("estimate"))),
                interval(rmst.get("lower"), rmst.get("upper"), format_number),
            ]
        rows.append(row)
    parts = [
        "<h2>Survival curves</h2>",
        figure_block(
            figure,
            f"Kaplan–Meier estimates with pointwise {ci} confidence bands; the table under the "
            "plot gives the numbers at risk.",
        ),
        "<h3>Summary by group</h3>",
        table(headers, rows, caption=f"Times in {unit}; survival in per cent."),
        "<h3>Text for a manuscript</h3>",
        bullets(sentences, "sentences"),
    ]
    return "\n".join(p for p in parts if p)


def comparison_section(comparison: Mapping | None, pairwise) -> str:
    if not comparison:
        return ""
    name = comparison["test"]
    parts = [
        "<h2>Group comparison</h2>",
        statistics_table([(name, comparison)]),
        "<p>"
        + escape(
            comparison_sentence(
                name, comparison["statistic"], comparison["df"], comparison["p_value"]
            )
        )
        + " A test that does not reach significance does not show that the groups are the "
        "same.</p>",
    ]
    left_out = comparison.get("rows_excluded") or 0
    if left_out:
        parts.append(
            f"<p>{left_out:,} row(s) without a group (or stratum) are in the all-rows curve but "
            "left out of this comparison.</p>"
        )
    if pairwise:
        headers, rows = record_rows(pairwise)
        parts += ["<h3>Pairwise comparisons</h3>", table(headers, rows)]
    return "\n".join(parts)


def _term_label(term: Mapping) -> str:
    if term.get("level") is None:
        return str(term["variable"])
    return f"{term['variable']}: {term['level']} (vs {term.get('reference')})"


def cox_section(cox: Mapping | None, confidence: float, forest) -> str:
    if not cox:
        return ""
    ci = format_confidence(confidence)
    rows = []
    for term in cox["terms"]:
        rows.append(
            [
                cell(_term_label(term)),
                num(term["coef"], format_number(term["coef"], 3)),
                num(term["se"], format_number(term["se"], 3)),
                num(term["hazard_ratio"], format_ratio(term["hazard_ratio"])),
                interval(term["lower"], term["upper"], format_ratio),
                num(term["p_value"], format_p(term["p_value"])),
            ]
        )
    parts = [
        "<h2>Cox proportional-hazards model</h2>",
        f'<p class="meta">{cox["n"]:,} rows used, {cox["events"]:,} events; tied times by the '
        f"{escape(str(cox.get('ties', '')).capitalize())} method.</p>",
        table(["Term", "Coefficient", "SE", "Hazard ratio", f"{ci} CI", "p"], rows),
        figure_block(forest, "Hazard ratios with their intervals on a log scale."),
        "<h3>Whole-model tests</h3>",
        statistics_table(
            [
                ("Likelihood ratio", cox.get("likelihood_ratio")),
                ("Wald", cox.get("wald")),
                ("Score", cox.get("score")),
            ]
        ),
    ]
    model_lines = []
    concordance = cox.get("concordance")
    if concordance is not None:
        se = cox.get("concordance_se")
        model_lines.append(
            f"Harrell's concordance: <span data-value={_quote(concordance)}>"
            f"{escape(format_number(concordance, 3))}</span>"
            + (f" (SE {escape(format_number(se, 3))})" if se is not None else "")
            + "."
        )
    if cox.get("aic") is not None:
        model_lines.append(
            f"AIC: <span data-value={_quote(cox['aic'])}>{escape(format_number(cox['aic'], 2))}"
            "</span>."
        )
    dropped = {k: v for k, v in (cox.get("rows_dropped") or {}).items() if v}
    if dropped:
        model_lines.append(
            "Rows left out of the model because a variable was missing: "
            + "; ".join(f"{escape(k)}: {int(v):,}" for k, v in dropped.items())
            + "."
        )
    parts += [f"<p>{line}</p>" for line in model_lines]
    drop_one = cox.get("drop_one") or []
    if drop_one:
        parts += [
            "<h3>Each variable removed in turn (likelihood-ratio tests)</h3>",
            statistics_table([(d["variable"], d) for d in drop_one], "Variable removed"),
        ]
    parts += [
        "<h3>Text for a manuscript</h3>",
        bullets(cox_sentences(cox, confidence), "sentences"),
    ]
    return "\n".join(p for p in parts if p)


def _quote(value) -> str:
    return '"' + escape("" if value is None else repr(value)) + '"'


def ph_section(cox: Mapping | None) -> str:
    checks = (cox or {}).get("ph_check") or []
    if not checks:
        return ""
    return (
        "<h2>Proportional-hazards checks</h2>\n"
        + statistics_table([(c["variable"], c) for c in checks], "Variable")
        + "<p>A small p-value suggests the hazard ratio of that variable changes over time; look "
        "at its residual plot before trusting a single hazard ratio.</p>"
    )


# --- optional analyses (competing risks, parametric, sample size, landmark) ---------------------


def competing_section(section: Mapping | None, unit: str, ci: str, figure) -> str:
    if not section:
        return ""
    rows = [
        [
            cell(group_label(r["group"])),
            cell(r["cause"]),
            *estimate_cells(r, "cumulative_incidence", format_percent),
            num(r["one_minus_km"], format_percent(r["one_minus_km"])),
            num(r["time"], format_number(r["time"])),
        ]
        for r in section["at_end"]
    ]
    parts = [
        "<h2>Competing risks</h2>",
        "<p>Causes: " + escape(", ".join(section["causes"])) + ".</p>",
        figure_block(figure, f"Cumulative incidence per cause (Aalen–Johansen) with {ci} bands."),
        table(
            ["Group", "Cause", "Cumulative incidence", f"{ci} CI", "1 − KM", f"At time ({unit})"],
            rows,
            caption="At the end of follow-up. 1 − KM treats other causes as censored.",
        ),
    ]
    if section.get("warning"):
        parts.append(f"<p><strong>Note.</strong> {escape(section['warning'])}</p>")
    if section.get("at_times"):
        parts.append(
            table(
                ["Group", "Cause", f"Time ({unit})", "Cumulative incidence", f"{ci} CI"],
                (
                    [
                        cell(group_label(r["group"])),
                        cell(r["cause"]),
                        num(r["time"], format_plain(r["time"])),
                        *estimate_cells(r, "cumulative_incidence", format_percent),
                    ]
                    for r in section["at_times"]
                ),
            )
        )
    for model in section.get("cause_specific_cox") or ():
        parts.append(
            f"<h3>Cause-specific Cox model: {escape(model['cause'])}</h3>"
            f'<p class="meta">{model["n"]:,} rows, {model["events"]:,} events of this cause; '
            "other causes censored.</p>"
        )
        parts.append(
            table(
                ["Term", "Hazard ratio", f"{ci} CI", "p"],
                (
                    [
                        cell(_term_label(t)),
                        num(t["hazard_ratio"], format_ratio(t["hazard_ratio"])),
                        interval(t["lower"], t["upper"], format_ratio),
                        num(t["p_value"], format_p(t["p_value"])),
                    ]
                    for t in model["terms"]
                ),
            )
        )
    return "\n".join(p for p in parts if p)


def parametric_section(section: Mapping | None, unit: str, ci: str, figure) -> str:
    if not section:
        return ""
    from engine.parametric import LABELS  # model names as people write them

    aic = [
        [
            cell(group_label(r["group"])),
            cell(LABELS.get(r["distribution"], r["distribution"])),
            num(r["n_parameters"], str(r["n_parameters"])),
            num(r["log_likelihood"], format_number(r["log_likelihood"], 2)),
            num(r["aic"], format_number(r["aic"], 2)),
            num(r["delta_aic"], format_number(r["delta_aic"], 2)),
        ]
        for r in section["aic_table"]
    ]
    estimates = []
    for r in section["estimates"]:
        what = "Median" if r["quantity"] == "median" else f"Survival at {format_plain(r['time'])}"
        fmt = format_number if r["quantity"] == "median" else format_percent
        estimates.append(
            [
                cell(group_label(r["group"])),
                cell(LABELS.get(r["distribution"], r["distribution"])),
                cell(what),
                *estimate_cells(r, "estimate", fmt),
                cell("extrapolated" if r["extrapolated"] else ""),
            ]
        )
    parts = [
        "<h2>Parametric models</h2>",
        figure_block(
            figure,
            "Fitted survival over the Kaplan–Meier estimate; dashed beyond the last observed "
            "time, where the curve is extrapolation from the model's shape, not data.",
        ),
        table(["Group", "Model", "Parameters", "Log-likelihood", "AIC", "Δ AIC"], aic),
        table(
            ["Group", "Model", "Estimate", "Value", f"{ci} CI", ""],
            estimates,
            caption=f"Medians in {unit}; survival in per cent.",
        ),
    ]
    aft = section.get("aft")
    if aft:
        parts.append(
            "<h3>Accelerated failure time model "
            f"({escape(LABELS.get(aft['distribution'], aft['distribution']))})</h3>"
            f'<p class="meta">{aft["n"]:,} rows, {aft["n_events"]:,} events. A time ratio above '
            "1 means the event tends to come later.</p>"
        )
        parts.append(
            table(
                ["Term", "Time ratio", f"{ci} CI", "p"],
                (
                    [
                        cell(c["term"]),
                        num(c.get("time_ratio"), format_ratio(c.get("time_ratio"))),
                        interval(
                            c.get("time_ratio_lower"), c.get("time_ratio_upper"), format_ratio
                        ),
                        num(c.get("p_value"), format_p(c.get("p_value"))),
                    ]
                    for c in aft["coefficients"]
                    if c["term"] != "Intercept"
                ),
            )
        )
    return "\n".join(p for p in parts if p)


def sample_size_section(section: Mapping | None) -> str:
    if not section:
        return ""
    rows = [
        [
            cell(r["method"].capitalize()),
            num(r["hazard_ratio"], format_plain(r["hazard_ratio"])),
            num(r["power"], format_percent(r["power"])),
            num(r["alpha"], format_plain(r["alpha"])),
            num(r["allocation_ratio"], format_plain(r["allocation_ratio"])),
            num(r["events"], f"{r['events']:,}"),
            num(r["subjects"], f"{r['subjects']:,}"),
        ]
        for r in section["needed"]
    ]
    parts = [
        "<h2>Sample size and power</h2>",
        table(
            ["Formula", "Hazard ratio", "Power", "Alpha", "Allocation", "Events", "Subjects"], rows
        ),
    ]
    for r in section.get("power") or ():
        parts.append(
            f"<p>{escape(r['method'].capitalize())}: with {escape(format_plain(r['events']))} "
            "events the power to detect a hazard ratio of "
            f"{escape(format_plain(r['hazard_ratio']))} is "
            f"{escape(format_percent(r['power']))}.</p>"
        )
    return "\n".join(parts)


def landmark_section(section: Mapping | None, unit: str, ci: str) -> str:
    if not section:
        return ""
    parts = [
        "<h2>Landmark analysis from "
        f"{escape(format_plain(section['landmark']))} {escape(unit)}</h2>",
        f"<p>{section['n_kept']:,} subjects still at risk at the landmark are analysed; "
        f"{section['n_excluded']:,} are left out (event or censoring before it, or entry "
        "after it). Times are measured from the landmark.</p>",
        table(
            ["Group", "Rows", "Kept", "Event before", "Censored before", "Entered after"],
            (
                [cell(group_label(r["group"]))]
                + [
                    num(r[k], f"{r[k]:,}")
                    for k in (
                        "n_rows",
                        "n_kept",
                        "n_events_before",
                        "n_censored_before",
                        "n_entered_after",
                    )
                ]
                for r in section["counts"]
            ),
        ),
        bullets((s for c in section["curves"] for s in curve_sentences(c, unit)), "sentences"),
    ]
    comparison = section.get("comparison")
    if comparison:
        parts.append(statistics_table([(comparison["test"], comparison)]))
    return "\n".join(p for p in parts if p)
