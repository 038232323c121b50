"""The command line's text output: a readable summary of the import and data checks, and of the
analysis sections (the JSON and the HTML report hold every number; these lines are for a shell).
"""

from __future__ import annotations

from engine.checks import PreparedData
from engine.io import ImportedTable


def data_summary(table: ImportedTable, prepared: PreparedData) -> str:
    """A readable summary of the import and the data checks."""
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
    return "\n".join([*lines, report_summary(report, roles)])


def report_summary(report, roles) -> str:
    """The data checks' summary (time, event, rows read and used, exclusions, groups,
    warnings), the same whether the rows were checked in memory or in a database."""
    lines = []
    time = roles.time or f"{roles.start} -> {roles.end}"
    lines.append(f"Time: {time} (reported in {report.time_unit})")
    if report.event_coding is not None:
        lines.append(f"Event: {report.event_coding.describe()}")
    lines.append(
        f"Rows read {report.rows_read}, used {report.rows_used}: "
        f"{report.events} events, {report.censored} censored"
    )
    for reason, rows in report.excluded:
        lines.append(f"  excluded: {rows} row(s), {reason}")
    if roles.group:
        lines.append(f"By {roles.group}:")
        for _, row in report.group_counts.iterrows():
            lines.append(
                f"  {row['group']!s:<20} n={row['n']:<7} events={row['events']:<7} "
                f"censored={row['censored']}"
            )
    lines += [f"Warning: {warning}" for warning in report.warnings]
    return "\n".join(lines)


def _fmt(value, digits: int = 3) -> str:
    return "n/a" if value is None else f"{value:.{digits}g}" if digits else str(value)


def _fixed(value, digits: int = 2) -> str:
    """A statistic or AIC to fixed decimals; "n/a" when it could not be computed (null)."""
    return "n/a" if value is None else f"{value:.{digits}f}"


def _test_line(test: dict) -> str:
    """'log-rank: chi-square 3.21 on 1 df, p = 0.073' (n/a where a value is null)."""
    return (
        f"{test['test']}: chi-square {_fixed(test['statistic'])} on {_fmt(test['df'], 0)} df, "
        f"p = {_fmt(test['p_value'])}"
    )


def analysis_summary(sections: dict, unit: str) -> str:
    """A readable summary of the curves, comparison and Cox sections."""
    lines = ["", f"Survival ({unit}):"]
    for curve in sections["curves"]:
        label = "all rows" if curve["group"] is None else curve["group"]
        median = curve["median"]
        text = (
            f"  {label!s:<20} n={curve['n']:<7} events={curve['events']:<7} "
            f"median {_fmt(median['estimate'], 4)} "
            f"({_fmt(median['lower'], 4)} to {_fmt(median['upper'], 4)})"
        )
        for point in curve["at_times"]:
            text += f"; S({point['time']:g})={_fmt(point['survival'])}"
        lines.append(text)
    comparison = sections["comparison"]
    if comparison is not None:
        lines.append(_test_line(comparison))
        if comparison.get("rows_excluded"):
            lines.append(
                f"  {comparison['rows_excluded']} row(s) without a group left out of the "
                "comparison (they are in the all-rows curve)"
            )
    cox = sections["cox"]
    if cox is not None:
        lines.append(f"Cox model ({cox['ties']} ties): n={cox['n']}, events={cox['events']}")
        for term in cox["terms"]:
            name = term["variable"] + (f"={term['level']}" if term["level"] is not None else "")
            lines.append(
                f"  {name:<28} HR {_fmt(term['hazard_ratio'])} "
                f"({_fmt(term['lower'])} to {_fmt(term['upper'])}), p = {_fmt(term['p_value'])}"
            )
        lr = cox["likelihood_ratio"] or {"statistic": None, "df": None, "p_value": None}
        lines.append(
            f"  likelihood ratio {_fixed(lr['statistic'])} on {_fmt(lr['df'], 0)} df, "
            f"p = {_fmt(lr['p_value'])}; concordance {_fmt(cox['concordance'])}"
        )
        lines += [f"  Warning: {warning}" for warning in cox["warnings"]]
    lines += extra_summary(sections, unit)
    return "\n".join(lines)


def extra_summary(sections: dict, unit: str) -> list[str]:
    """Short lines for the optional sections (the JSON and the report hold everything)."""
    lines = []
    competing = sections.get("competing")
    if competing:
        lines.append("Cumulative incidence at the end of follow-up (Aalen–Johansen):")
        for row in competing["at_end"]:
            label = "all rows" if row["group"] is None else row["group"]
            lines.append(
                f"  {label!s:<20} {row['cause']!s:<12} {_fmt(row['cumulative_incidence'])} "
                f"({_fmt(row['lower'])} to {_fmt(row['upper'])}) at {_fmt(row['time'], 4)}"
            )
        if competing["warning"]:
            lines.append(f"  Note: {competing['warning']}")
        for row in competing.get("gray_test") or ():
            lines.append(
                f"  Gray's test, {row['cause']}: chi-square {row['statistic']:.2f} on "
                f"{row['df']} df, p = {row['p_value']:.3g}"
            )
        fine_gray = competing.get("fine_gray")
        if fine_gray:
            lines.append(
                f"Fine–Gray model of {fine_gray['cause']} ({fine_gray['n']} rows, "
                f"{fine_gray['events']} events; robust standard errors):"
            )
            for term in fine_gray["terms"]:
                label = term["variable"] + (
                    f": {term['level']} vs {term['reference']}" if term["level"] else ""
                )
                lines.append(
                    f"  {label:<32} subdistribution HR {_fmt(term['hazard_ratio'])} "
                    f"({_fmt(term['lower'])} to {_fmt(term['upper'])}), "
                    f"p = {_fmt(term['p_value'])}"
                )
    parametric = sections.get("parametric")
    if parametric:
        lines.append("Parametric models by AIC (lower is better):")
        for row in parametric["aic_table"]:
            label = "" if row["group"] is None else f"{row['group']}: "
            lines.append(
                f"  {label}{row['distribution']:<12} AIC {_fixed(row['aic'])} "
                f"(Δ {_fixed(row['delta_aic'])})"
            )
    size = sections.get("sample_size")
    if size:
        for row in size["needed"]:
            lines.append(
                f"{row['method'].capitalize()}: {row['events']} events, {row['subjects']} "
                f"subjects for HR {row['hazard_ratio']:g} (power {row['power']:g}, "
                f"alpha {row['alpha']:g})"
            )
        for row in size["power"] or ():
            lines.append(
                f"{row['method'].capitalize()}: power {_fixed(row['power'], 3)} with "
                f"{_fmt(row['events'], 0)} events"
            )
    landmark = sections.get("landmark")
    if landmark:
        lines.append(
            f"Landmark at {landmark['landmark']:g} {unit}: {landmark['n_kept']} kept, "
            f"{landmark['n_excluded']} excluded (event or censored before, or entered after)"
        )
        comparison = landmark["comparison"]
        if comparison is not None:
            lines.append("  " + _test_line(comparison))
    performance = sections.get("performance")
    if performance:
        lines.append(
            f"Prediction performance: Harrell's C {_fmt(performance['harrell_c'])}, Uno's C "
            f"{_fmt(performance['uno_c'])} (up to {performance['tau']:g} {unit}), integrated "
            f"Brier score {_fmt(performance['integrated_brier'])} (Kaplan–Meier alone "
            f"{_fmt(performance['integrated_brier_km'])})"
        )
        for t, auc, brier in zip(
            performance["times"], performance["auc"], performance["brier"], strict=True
        ):
            lines.append(f"  at {t:g} {unit}: AUC {_fmt(auc)}, Brier score {_fmt(brier)}")
        optimism = performance["optimism"]
        if optimism:
            lines.append(
                f"  Optimism-corrected C {_fmt(optimism['c'])}, calibration slope "
                f"{_fmt(optimism['slope'])} ({optimism['replicates']} bootstrap replicates, "
                f"seed {optimism['seed']})"
            )
    return lines
