"""The report's sections, one per analysis: data, column roles, curves, comparison, Cox model,
proportional-hazards checks, competing risks, parametric models, sample size and landmark.

Each takes its part of the command line's JSON (schema 2) and returns an HTML fragment, or ""
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
    not_computed_block,
    num,
    or_reason,
    record_rows,
    statistics_table,
    table,
)
from app.report_prediction import competing_regression_block
from engine.analysis.run import is_not_computed
from engine.survival.curves import MEDIAN_FOOTNOTE
from engine.wording import (
    NOT_REACHED,
    comparison_sentence,
    cox_sentences,
    curve_sentences,
    format_confidence,
    format_nonzero,
    format_number,
    format_p,
    format_percent,
    format_plain,
    format_ratio,
    free_name,
    hazard_ratio_direction,
    median_name,
    rmst_name,
    term_label,
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


BACKEND_WORDS = {
    "memory": "in memory by {version}",
    "duckdb": "by DuckDB {version}, reading the file where it is",
    "postgresql": "inside PostgreSQL {version}; only per-time sums left the database",
    "spark": "by Apache Spark {version}",
}


def computed_with_text(computed_with: Mapping | None) -> str:
    """Where the rows were aggregated, in words (the JSON's ``computed_with``)."""
    if not computed_with:
        return ""
    backend = str(computed_with.get("backend", ""))
    words = BACKEND_WORDS.get(backend, backend + " {version}")
    text = "Computed " + words.format(version=computed_with.get("version", ""))
    sample = computed_with.get("sample")
    if sample:
        taken = ", ".join(sample.get("sections") or ()) or "none were needed"
        text += (
            f". On a random sample of {int(sample['rows']):,} rows (seed {sample['seed']}), "
            f"because per-time sums cannot give them: {taken}"
        )
    return text + "."


def data_section(
    data: Mapping,
    fingerprint: Mapping | None,
    filters: Sequence[Mapping],
    computed_with: Mapping | None = None,
) -> str:
    unit = data.get("time_unit", "")
    parts = ["<h2>Data</h2>"]
    if fingerprint:
        name = escape(fingerprint.get("file_name") or "(unnamed)")
        size = f"{int(fingerprint['rows']):,} rows and {len(fingerprint['columns'])} columns"
        if fingerprint.get("sha256"):
            parts.append(
                f'<p class="meta">File {name}, {size}; SHA-256 <code>'
                + escape(fingerprint["sha256"])
                + "</code>.</p>"
            )
        else:  # rows in a database: no file to fingerprint
            parts.append(f'<p class="meta">Source {name}, {size}.</p>')
    if computed_with:
        parts.append(f'<p class="meta">{escape(computed_with_text(computed_with))}</p>')
    counts = [
        ("Rows read", data["rows_read"]),
        ("Rows used", data["rows_used"]),
        ("Events", data["events"]),
        *([("Competing events", data["competing_events"])] if data.get("competing_events") else []),
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


LABELLED_ROLES = ("time", "start", "end", "event", "group", "covariates", "strata", "entry", "id")


def roles_section(roles: Mapping | None, column_labels: Mapping[str, str] | None = None) -> str:
    """The roles; a column's variable label (SPSS, Stata or SAS files) in brackets after it."""
    if not roles:
        return ""
    labels = dict(column_labels or {})

    def named(column) -> str:
        label = labels.get(str(column))
        return f"{column} ({label})" if label else str(column)

    rows = []
    for key, words in ROLE_WORDS:
        value = roles.get(key)
        if value in (None, "", [], ()):
            continue
        if key == "reference":
            value = ", ".join(f"{column} = {level}" for column, level in value)
        elif key in LABELLED_ROLES and isinstance(value, list | tuple):
            value = ", ".join(named(v) for v in value)
        elif isinstance(value, list | tuple):
            value = ", ".join(str(v) for v in value)
        elif key in LABELLED_ROLES:
            value = named(value)
        rows.append([cell(words), cell(value)])
    return "<h2>Column roles</h2>\n" + table(["Role", "Column or value"], rows)


@or_reason("Survival curves")
def curves_section(
    curves: Sequence[Mapping], unit: str, confidence: float, figure, event: str | None = None
) -> str:
    """The Kaplan–Meier figure, the summary by group and its sentences; ``event`` names the
    event in words (``engine.prepare.roles.event_in_words``)."""
    if not curves:
        return ""
    ci = format_confidence(confidence)
    times = [p["time"] for p in curves[0].get("at_times", [])]
    free = free_name(event).capitalize()
    headers = [
        "Group",
        "Subjects",
        "Events",
        "Censored",
        f"{median_name(event).capitalize()} ({unit})",
        f"{ci} CI",
    ]
    for t in times:
        headers += [f"{free} at {format_plain(t)} {unit}", f"{ci} CI", "At risk"]
    has_rmst = any(c.get("rmst") for c in curves)
    rmst_span = next((c["rmst"] for c in curves if "tau" in (c.get("rmst") or {})), None)
    if has_rmst:
        span = ""
        if rmst_span:
            start = rmst_span.get("origin")
            span = f" {'from ' + format_plain(start) + ' ' if start else ''}to "
            span += format_plain(rmst_span["tau"])
        headers += [f"{rmst_name(event).capitalize()}{span} ({unit})", f"{ci} CI"]
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
        sentences += curve_sentences(c, unit, confidence, event)
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
            f"Kaplan–Meier estimates of the {free_name(event)} with pointwise {ci} confidence "
            "intervals (dotted edges); a short upright stroke marks each censored time; the "
            f"table under the plot gives the subjects still at risk. Times in {unit}.",
        ),
        "<h3>Summary by group</h3>",
        table(
            headers,
            rows,
            caption=f"Times in {unit}; probabilities in per cent. {MEDIAN_FOOTNOTE}"
            + (f" {rmst_span['origin_rule']}" if (rmst_span or {}).get("origin_rule") else ""),
        ),
        "<h3>Text for a manuscript</h3>",
        bullets(sentences, "sentences"),
    ]
    return "\n".join(p for p in parts if p)


@or_reason("Group comparison")
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
    return term_label(term["variable"], term.get("level"), term.get("reference"))


@or_reason("Cox proportional-hazards model")
def cox_section(cox: Mapping | None, confidence: float, forest) -> str:
    if not cox:
        return ""
    ci = format_confidence(confidence)
    rows = []
    for term in cox["terms"]:
        rows.append(
            [
                cell(_term_label(term)),
                num(term["hazard_ratio"], format_ratio(term["hazard_ratio"])),
                interval(term["lower"], term["upper"], format_ratio),
                num(term["p_value"], format_p(term["p_value"])),
                num(term["coef"], format_nonzero(term["coef"], 3)),
                num(term["se"], format_nonzero(term["se"], 3)),
            ]
        )
    parts = [
        "<h2>Cox proportional-hazards model</h2>",
        f'<p class="meta">{cox["n"]:,} rows used, {cox["events"]:,} events; tied times by the '
        f"{escape(str(cox.get('ties', '')).capitalize())} method.</p>",
        table(cox_headers(ci), rows),
        figure_block(
            forest,
            f"Hazard ratios (squares) with their {ci}s on a log scale; the dashed line is a "
            "hazard ratio of 1.",
        ),
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
    without_each = cox.get("without_each") or []
    if without_each:
        parts += [
            "<h3>The model without each covariate (likelihood-ratio tests)</h3>",
            statistics_table([(d["variable"], d) for d in without_each], "Covariate left out"),
        ]
    parts += [
        "<h3>Text for a manuscript</h3>",
        bullets(cox_sentences(cox, confidence), "sentences"),
    ]
    return "\n".join(p for p in parts if p)


def _quote(value) -> str:
    return '"' + escape("" if value is None else repr(value)) + '"'


def ph_check_rows(check: Mapping | None) -> list[tuple[str, Mapping]]:
    """(label, test) rows of a JSON ``ph_check``: each term, then all terms together."""
    from engine.cox.diagnostics import ALL_TERMS

    if not check:
        return []
    return [(c["variable"], c) for c in check["terms"]] + [(ALL_TERMS, check["all_terms"])]


def ph_section(cox: Mapping | None, figure=None, plotted: str | None = None) -> str:
    """The Grambsch–Therneau tests per covariate and for all terms together, the time scale in
    words, and the scaled Schoenfeld residuals of ``plotted`` (the term with the smallest
    p-value) when ``figure`` is given."""
    from engine.cox.diagnostics import TIME_SCALE_WORDS

    if is_not_computed(cox):
        return ""
    check = (cox or {}).get("ph_check")
    if is_not_computed(check):
        return not_computed_block("Proportional-hazards checks", check)
    if not check:
        return ""
    scale = check.get("time_scale", "survival")
    rows = ph_check_rows(check)
    parts = [
        "<h2>Proportional-hazards checks</h2>",
        statistics_table(rows, "Covariate"),
        "<p>"
        + escape(
            "Grambsch–Therneau tests from scaled Schoenfeld residuals, on the time scale "
            f"“{scale}”: {TIME_SCALE_WORDS.get(scale, scale)}. A small p-value suggests the "
            "hazard ratio of that covariate changes over time."
        )
        + "</p>",
    ]
    if figure is not None and plotted:
        parts.append(
            figure_block(
                figure,
                f"Scaled Schoenfeld residuals of {plotted} (the term with the smallest p-value) "
                "against time on that scale, with a smoother; a flat smoother at the dashed line "
                "(the model's coefficient) is what proportional hazards predicts. The "
                "Regression page of the app draws every term.",
            )
        )
    else:
        parts.append(
            "<p>"
            + escape(
                "Before trusting a single hazard ratio, look at the residual plot of each "
                "covariate on the Regression page of the app (Proportional hazards tab)."
            )
            + "</p>"
        )
    return "\n".join(parts)


def cox_headers(ci: str) -> list[str]:
    """One order and one set of names for the Cox table, as on the Regression page."""
    return [
        "Term",
        "Hazard ratio",
        f"{ci} CI",
        "p",
        "Coefficient (log hazard ratio)",
        "Standard error",
    ]


# --- optional analyses (competing risks, parametric, sample size, landmark) ---------------------


@or_reason("Competing risks")
def competing_section(
    section: Mapping | None, unit: str, ci: str, figure, fine_gray_forest=None
) -> str:
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
    parts.append(competing_regression_block(section, unit, ci, fine_gray_forest))
    models = section.get("cause_specific_cox") or ()
    if is_not_computed(models):
        parts.append(not_computed_block("Cause-specific Cox models", models, level=3))
        models = ()
    for model in models:
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


@or_reason("Parametric models")
def parametric_section(section: Mapping | None, unit: str, ci: str, figure) -> str:
    if not section:
        return ""
    from engine.parametric.fits import LABELS  # model names as people write them

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
    if section.get("rows_time_zero"):
        parts.append(
            f"<p>{section['rows_time_zero']:,} row(s) with time 0 are left out of these fits: "
            "none of the four families has a density at time 0. The Kaplan–Meier curve keeps "
            "them.</p>"
        )
    aft = section.get("aft")
    if is_not_computed(aft):
        parts.append(not_computed_block("Accelerated failure time model", aft, level=3))
        aft = None
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


@or_reason("Sample size and power")
def sample_size_section(section: Mapping | None) -> str:
    if not section:
        return ""
    rows = [
        [
            cell(r["method"].capitalize()),
            num(r["hazard_ratio"], format_plain(r["hazard_ratio"])),
            num(r["power"], format_percent(r["power"])),
            num(r["alpha"], format_plain(r["alpha"])),
            num(r.get("sides"), "" if r.get("sides") is None else f"{int(r['sides'])}-sided"),
            num(r["allocation_ratio"], format_plain(r["allocation_ratio"])),
            num(r["events"], f"{r['events']:,}"),
            num(r["subjects"], f"{r['subjects']:,}"),
        ]
        for r in section["needed"]
    ]
    parts = [
        "<h2>Sample size and power</h2>",
        "<p>" + escape(hazard_ratio_direction(section["needed"][0]["hazard_ratio"])) + "</p>"
        if section["needed"]
        else "",
        table(
            [
                "Formula",
                "Hazard ratio (experimental vs control)",
                "Power",
                "Alpha",
                "Sides",
                "Allocation (experimental : control)",
                "Events",
                "Subjects",
            ],
            rows,
        ),
    ]
    for r in section.get("power") or ():
        parts.append(
            f"<p>{escape(r['method'].capitalize())}: with {escape(format_plain(r['events']))} "
            "events the power to detect a hazard ratio of "
            f"{escape(format_plain(r['hazard_ratio']))} is "
            f"{escape(format_percent(r['power']))}.</p>"
        )
    return "\n".join(p for p in parts if p)


@or_reason("Landmark analysis")
def landmark_section(section: Mapping | None, unit: str, ci: str, event: str | None = None) -> str:
    if not section:
        return ""
    parts = [
        "<h2>Landmark analysis from "
        f"{escape(format_plain(section['landmark']))} {escape(unit)}</h2>",
        f"<p>{section['n_kept']:,} subjects still at risk at the landmark are analysed; "
        f"{section['n_excluded']:,} are left out (event or censoring before it, or entry "
        "after it). Times are measured from the landmark.</p>",
        table(
            [
                "Group",
                "Subjects",
                "Kept",
                "Event before the landmark",
                "Censored before the landmark",
                "Entered after the landmark",
            ],
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
        bullets(
            (
                s
                for c in section["curves"]
                for s in curve_sentences(c, unit, event=event, after="after the landmark")
            ),
            "sentences",
        ),
    ]
    comparison = section.get("comparison")
    if is_not_computed(comparison):
        parts.append(not_computed_block("Comparison from the landmark", comparison, level=3))
    elif comparison:
        parts.append(statistics_table([(comparison["test"], comparison)]))
        parts.append(
            "<p>"
            + escape(
                "After the landmark: "
                + comparison_sentence(
                    comparison["test"],
                    comparison["statistic"],
                    comparison["df"],
                    comparison["p_value"],
                )
            )
            + "</p>"
        )
    return "\n".join(p for p in parts if p)
