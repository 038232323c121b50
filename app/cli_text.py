"""The command line's text output: a readable summary of the import and data checks, and of the
analysis sections (the JSON and the HTML report hold every number; these lines are for a shell).

Numbers are rounded by ``engine.wording``'s rules (the report's and the manuscript sentences'),
terms are labelled "variable: level vs reference" and results are laid out as short labelled
blocks, each with its own header line.
"""

from __future__ import annotations

from engine.analysis.run import NOT_COMPUTED, is_not_computed
from engine.io.tables import ImportedTable
from engine.parametric.fits import LABELS
from engine.prepare.checks import PreparedData
from engine.prepare.filters import FilterOutcome
from engine.prepare.roles import event_in_words
from engine.wording import (
    NOT_REACHED,
    comparison_sentence,
    format_confidence,
    format_interval,
    format_number,
    format_p,
    format_percent,
    format_plain,
    format_ratio,
    median_name,
    p_clause,
    term_label,
)


def data_summary(
    table: ImportedTable, prepared: PreparedData, filtered: FilterOutcome | None = None
) -> str:
    """A readable summary of the import, the row filters and the data checks."""
    report = prepared.report
    roles = prepared.roles
    options = table.options
    lines = [f"File: {table.source_name} ({table.file_format}, sha256 {table.sha256[:12]}...)"]
    if table.file_format == "csv":
        lines.append(
            f"Read with separator {options.sep!r}, decimal {options.decimal!r}, "
            f"encoding {options.encoding}" + ("" if table.confident else " (detection unsure)")
        )
    lines += [f"  note: {note}" for note in table.notes]
    return "\n".join([*lines, *filter_lines(filtered), report_summary(report, roles)])


def filter_lines(filtered: FilterOutcome | None) -> list[str]:
    """A line per row filter: the rows it left out."""
    excluded = filtered.excluded if filtered is not None else ()
    return [f"Filter {text}: {rows} row(s) left out" for text, rows in excluded]


def report_summary(report, roles) -> str:
    """The data checks' summary (time, event, rows read and used, exclusions, groups,
    warnings), the same whether the rows were checked in memory or in a database."""
    lines = []
    time = roles.time or f"{roles.start} -> {roles.end}"
    lines.append(f"Time: {time} (reported in {report.time_unit})")
    if report.event_coding is not None:
        lines.append(f"Event: {report.event_coding.describe()}")
    competing = f", {report.competing_events} competing events" if report.competing_events else ""
    lines.append(
        f"Rows read {report.rows_read:,}, used {report.rows_used:,}: "
        f"{report.events:,} events{competing}, {report.censored:,} censored"
    )
    for reason, rows in report.excluded:
        lines.append(f"  excluded: {rows:,} row(s), {reason}")
    if roles.group:
        lines.append(f"Group: {roles.group}")
        competing_header = f" {'competing':>9}" if report.competing_events else ""
        lines.append(
            f"  {'level':<20} {'subjects':>9} {'events':>9}{competing_header} {'censored':>9}"
        )
        for _, row in report.group_counts.iterrows():
            lines.append(
                f"  {row['group']!s:<20} {row['n']:>9,} {row['events']:>9,}"
                + (f" {row['competing']:>9,}" if report.competing_events else "")
                + f" {row['censored']:>9,}"
            )
    lines += [f"Warning: {warning}" for warning in report.warnings]
    return "\n".join(lines)


def _time(value) -> str:
    return format_number(value, 1, missing=NOT_REACHED)


SECTION_TITLES = {
    "curves": "Survival curves",
    "comparison": "Group comparison",
    "cox": "Cox model",
    "ph_check": "proportional-hazards check",
    "competing": "Competing risks",
    "cause_specific_cox": "cause-specific Cox models",
    "gray_test": "Gray's test",
    "fine_gray": "Fine–Gray model",
    "parametric": "Parametric models",
    "sample_size": "Sample size and power",
    "landmark": "Landmark analysis",
    "performance": "Prediction performance",
    "subgroups": "Subgroup effects",
    "baseline": "Baseline table",
    "splines": "non-linear effects",
    "time_split": "follow-up split",
}


def not_computed_lines(sections: dict) -> tuple[list[str], dict]:
    """A line per section (or part of one) that could not be computed, with its reason, and
    the sections with those parts set to None so the summaries below skip them."""
    lines, shown = [], {}
    for name, section in sections.items():
        if is_not_computed(section):
            lines.append(f"{SECTION_TITLES.get(name, name)}: not computed. {section[NOT_COMPUTED]}")
            shown[name] = None
            continue
        if isinstance(section, dict):
            parts = {k: v for k, v in section.items() if is_not_computed(v)}
            for part, value in parts.items():
                title = f"{SECTION_TITLES.get(name, name)}, {SECTION_TITLES.get(part, part)}"
                lines.append(f"{title}: not computed. {value[NOT_COMPUTED]}")
            section = {**section, **dict.fromkeys(parts)}
        shown[name] = section
    return lines, shown


def analysis_summary(
    sections: dict, unit: str, *, confidence: float = 0.95, event: str | None = None
) -> str:
    """A readable summary of the curves, comparison and Cox sections (and the optional ones).

    ``event`` names the event in words (``engine.prepare.roles.event_in_words``); ``confidence`` is
    the
    hazard ratios' interval level. A section that could not be computed is one line saying why."""
    reasons, sections = not_computed_lines(sections)
    lines = ["", f"Curves (times in {unit})"]
    median = median_name(event)
    lines.append(f"  {'group':<20} {'subjects':>9} {'events':>9}   {median} (interval)")
    for curve in sections["curves"] or ():
        label = "All rows" if curve["group"] is None else curve["group"]
        m = curve["median"]
        text = (
            f"  {label!s:<20} {curve['n']:>9,} {curve['events']:>9,}   {_time(m['estimate'])} "
            f"({_time(m['lower'])} to {_time(m['upper'])})"
        )
        for point in curve["at_times"]:
            text += f"; at {format_plain(point['time'])}: {format_percent(point['survival'])}"
        lines.append(text)
    lines += rmst_lines(sections["curves"] or (), unit)
    comparison = sections["comparison"]
    if comparison is not None:
        lines += ["", "Group comparison", "  " + _test_sentence(comparison)]
        if comparison.get("rows_excluded"):
            lines.append(
                f"  {comparison['rows_excluded']:,} row(s) without a group left out of the "
                "comparison (they are in the all-rows curve)"
            )
    cox = sections["cox"]
    if cox is not None:
        lines += ["", *cox_summary(cox, confidence), *model_variant_summary(cox)]
    lines += extra_summary(sections, unit)
    lines += subgroup_summary(sections)
    if reasons:
        lines += ["", *reasons]
    return "\n".join(lines)


def rmst_lines(curves, unit: str) -> list[str]:
    """The restricted means of the curves (with --rmst-horizon): one line per curve, and the
    sentence on their origin when there is delayed entry."""
    rmst = [(c["group"], c["rmst"]) for c in curves if c.get("rmst")]
    if not rmst:
        return []
    found = next((r for _, r in rmst if "tau" in r), None)
    title = "Restricted mean survival time"
    if found:
        start = f"from {format_plain(found['origin'])} " if found["origin"] else ""
        title += f" {start}to {format_plain(found['tau'])} {unit}"
    lines = ["", title]
    for group, r in rmst:
        label = "All rows" if group is None else group
        if "not_computed" in r:
            lines.append(f"  {label!s:<20} not computed: {r['not_computed']}")
            continue
        lines.append(
            f"  {label!s:<20} {format_number(r['estimate'], 2)} "
            f"({format_interval(r['lower'], r['upper'], lambda v: format_number(v, 2))})"
        )
    if found and found.get("origin_rule"):
        lines.append(f"  Note: {found['origin_rule']}")
    return lines


def _test_sentence(test: dict) -> str:
    """'Log-rank test: chi-squared 3.21 on 1 degree of freedom, p = 0.073' ("not estimable"
    where a value is null)."""
    return comparison_sentence(test["test"], test["statistic"], test["df"], test["p_value"])


def _terms_block(terms: list[dict], ratio_name: str, ci: str) -> list[str]:
    """Rows of a model's terms, the ratio first: label, ratio, interval, p."""
    labels = [term_label(t["variable"], t["level"], t["reference"]) for t in terms]
    ratios = [format_ratio(t["hazard_ratio"]) for t in terms]
    intervals = [format_interval(t["lower"], t["upper"]) for t in terms]
    width = max([len("term"), *(len(label) for label in labels)]) + 2
    ratio_width = max([len(ratio_name), 12, *(len(r) for r in ratios)])
    ci_width = max([len(ci), 18, *(len(i) for i in intervals)]) + 2
    lines = [f"  {'term':<{width}}{ratio_name:>{ratio_width}}   {ci:<{ci_width}}p"]
    for label, ratio, interval, term in zip(labels, ratios, intervals, terms, strict=True):
        lines.append(
            f"  {label:<{width}}{ratio:>{ratio_width}}   "
            f"{interval:<{ci_width}}{format_p(term['p_value'])}"
        )
    return lines


def cox_summary(cox: dict, confidence: float = 0.95) -> list[str]:
    """The Cox model as a block: rows and events, a term table with hazard ratios first, the
    whole-model tests one per line, concordance and the proportional-hazards check."""
    ci = f"{format_confidence(confidence)} CI"
    lines = [
        f"Cox model ({str(cox['ties']).capitalize()} method for tied times): "
        f"{cox['n']:,} rows used, {cox['events']:,} events"
    ]
    lines += _terms_block(cox["terms"], "hazard ratio", ci)
    tests = [
        (name, cox.get(key))
        for name, key in (
            ("Likelihood ratio", "likelihood_ratio"),
            ("Wald", "wald"),
            ("Score", "score"),
        )
        if cox.get(key)
    ]
    if not tests:
        lines.append("  Tests of the whole model: not computed")
    else:
        df = tests[0][1].get("df")
        lines.append(
            "  Tests of the whole model"
            + (f" ({format_plain(df)} degree(s) of freedom each):" if df is not None else ":")
        )
    for name, test in tests:
        lines.append(
            f"    {name:<18}chi-squared {format_number(test['statistic'], 2)}, "
            f"{p_clause(test['p_value'])}"
        )
    if cox.get("concordance") is not None:
        lines.append(f"  Concordance (Harrell's C): {format_number(cox['concordance'], 3)}")
    ph = cox.get("ph_check")
    if ph:
        joint = ph["all_terms"]
        lines.append(
            f"  Proportional hazards, all terms together ({ph['time_scale']} time scale): "
            f"chi-squared {format_number(joint['statistic'], 2)}, {p_clause(joint['p_value'])}"
        )
    lines += [f"  Warning: {warning}" for warning in cox["warnings"]]
    return lines


def extra_summary(sections: dict, unit: str) -> list[str]:
    """Short lines for the optional sections (the JSON and the report hold everything)."""
    lines = []
    competing = sections.get("competing")
    if competing:
        lines += ["", "Cumulative incidence at the end of follow-up (Aalen–Johansen)"]
        for row in competing["at_end"]:
            label = "All rows" if row["group"] is None else row["group"]
            lines.append(
                f"  {label!s:<20} {row['cause']!s:<12} "
                f"{format_percent(row['cumulative_incidence'])} "
                f"({format_percent(row['lower'])} to {format_percent(row['upper'])}) at "
                f"{format_number(row['time'], 1)} {unit}"
            )
        if competing["warning"]:
            lines.append(f"  Note: {competing['warning']}")
        for row in competing.get("gray_test") or ():
            lines.append(f"  {row['cause']}: " + _test_sentence({**row, "test": "Gray's"}))
        fine_gray = competing.get("fine_gray")
        if fine_gray:
            lines += [
                "",
                f"Fine–Gray model of {fine_gray['cause']}: {fine_gray['n']:,} rows, "
                f"{fine_gray['events']:,} events; robust standard errors",
                *_terms_block(fine_gray["terms"], "subdistribution HR", "95% CI"),
            ]
    parametric = sections.get("parametric")
    if parametric:
        lines += ["", "Parametric models by AIC (lower is better)"]
        if parametric.get("rows_time_zero"):
            lines.append(
                f"  {parametric['rows_time_zero']:,} row(s) with time 0 left out of these fits "
                "(no density at 0)"
            )
        for row in parametric["aic_table"]:
            label = "" if row["group"] is None else f"{row['group']}: "
            name = LABELS.get(row["distribution"], row["distribution"])
            lines.append(
                f"  {label}{name:<13} AIC {format_number(row['aic'], 2)} "
                f"(Δ {format_number(row['delta_aic'], 2)})"
            )
    size = sections.get("sample_size")
    if size:
        lines += ["", "Sample size"]
        for row in size["needed"]:
            lines.append(
                f"  {row['method'].capitalize()}: {row['events']:,} events, {row['subjects']:,} "
                f"subjects for a hazard ratio of {format_plain(row['hazard_ratio'])} "
                f"(power {format_percent(row['power'])}, alpha {format_plain(row['alpha'])})"
            )
        for row in size["power"] or ():
            lines.append(
                f"  {row['method'].capitalize()}: power {format_percent(row['power'])} with "
                f"{format_plain(row['events'])} events"
            )
    landmark = sections.get("landmark")
    if landmark:
        lines += ["", f"Landmark at {format_plain(landmark['landmark'])} {unit}"]
        lines.append(
            f"  {landmark['n_kept']:,} kept, {landmark['n_excluded']:,} left out (event or "
            "censored before the landmark, or entered after it)"
        )
        comparison = landmark["comparison"]
        if comparison is not None:
            lines.append("  After the landmark: " + _test_sentence(comparison))
    baseline = sections.get("baseline")
    if baseline:
        variables = list(dict.fromkeys(row["variable"] for row in baseline["rows"]))
        by = f" by {baseline['group']}" if baseline["group"] else ""
        lines.append(
            f"Baseline table{by}: {len(variables)} column(s) ({', '.join(variables[:8])}"
            + (", …" if len(variables) > 8 else "")
            + "); every row is in the JSON and the report"
        )
    performance = sections.get("performance")
    if performance:
        lines += [
            "",
            f"Prediction performance (up to {format_plain(performance['tau'])} {unit})",
            f"  Harrell's C {format_number(performance['harrell_c'], 3)}, Uno's C "
            f"{format_number(performance['uno_c'], 3)}; integrated Brier score "
            f"{format_number(performance['integrated_brier'], 3)} (Kaplan–Meier alone "
            f"{format_number(performance['integrated_brier_km'], 3)})",
        ]
        for t, auc, brier in zip(
            performance["times"], performance["auc"], performance["brier"], strict=True
        ):
            lines.append(
                f"  at {format_plain(t)} {unit}: AUC {format_number(auc, 3)}, Brier score "
                f"{format_number(brier, 3)}"
            )
        optimism = performance["optimism"]
        if optimism:
            lines.append(
                f"  Optimism-corrected C {format_number(optimism['c'], 3)}, calibration slope "
                f"{format_number(optimism['slope'], 3)} ({optimism['replicates']} bootstrap "
                f"replicates, seed {optimism['seed']})"
            )
    return lines


def event_words(prepared: PreparedData) -> str:
    """The event in words for the summary's headers."""
    return event_in_words(prepared.roles)


def model_variant_summary(cox: dict) -> list[str]:
    """Short lines for the robust variance, the splines, the split follow-up; subgroups are
    summarised by ``subgroup_summary``."""
    lines = []
    if cox.get("variance") == "robust":
        lines.append(f"  Standard errors: robust, {cox['clusters']:,} clusters (subjects)")
    for spline in cox.get("splines") or ():
        test = spline["nonlinearity"]
        lines.append(
            f"  Spline of {spline['variable']} ({len(spline['knots'])} knots), non-linearity: "
            + _test_sentence({**test, "test": "likelihood-ratio"})
        )
    split = cox.get("time_split")
    if split:
        check = split["model"]["ph_check"]
        joint = check["all_terms"] if isinstance(check, dict) else check[-1]
        lines.append(
            f"  Follow-up split at {', '.join(format_plain(t) for t in split['times'])} "
            f"({split['episodes']:,} episodes); proportional hazards after the split, all terms "
            f"together: chi-squared {format_number(joint['statistic'], 2)}, "
            f"{p_clause(joint['p_value'])}"
        )
    return lines


def subgroup_summary(sections: dict) -> list[str]:
    subgroups = sections.get("subgroups")
    if not subgroups:
        return []
    lines = ["", f"Subgroups ({subgroups['treatment']}), exploratory"]
    lines.append(f"  {'subgroup':<30} {'subjects':>9} {'events':>9}   hazard ratio (95% CI)")
    for row in subgroups["rows"]:
        label = f"{row['variable']}: {row['level']}"
        lines.append(
            f"  {label:<30} {row['n']:>9,} {row['events']:>9,}   "
            f"{format_ratio(row['hazard_ratio'])} ({format_ratio(row['lower'])} to "
            f"{format_ratio(row['upper'])})"
        )
    for test in subgroups["interactions"]:
        lines.append(f"  interaction with {test['variable']}: {p_clause(test['p_value'])}")
    return lines
