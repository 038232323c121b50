"""Report sections for competing-risks regression (Gray's test, the Fine–Gray model) and for the
prediction performance of the Cox model. Every number is the JSON's; text is escaped."""

from __future__ import annotations

from collections.abc import Mapping

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
from engine.analysis.run import is_not_computed
from engine.wording import format_nonzero, format_number, format_p, format_plain, format_ratio


def _term_label(term: Mapping) -> str:
    if term.get("level") is None:
        return str(term["variable"])
    return f"{term['variable']}: {term['level']} vs {term.get('reference')}"


def competing_regression_block(section: Mapping, unit: str, ci: str, forest) -> str:
    """Gray's test per cause and the Fine–Gray model, inside the competing-risks section."""
    parts = []
    tests = section.get("gray_test")
    if is_not_computed(tests):
        parts.append(not_computed_block("Gray's test", tests, level=3))
    elif tests:
        parts += [
            "<h3>Gray's test of equal cumulative incidence across groups</h3>",
            statistics_table([(t["cause"], t) for t in tests], "Cause"),
            "<p>One test per cause (Gray 1988, log-rank weights); the other causes are "
            "competing events. A large p-value is not evidence that the groups are alike.</p>",
        ]
    model = section.get("fine_gray")
    if is_not_computed(model):
        parts.append(not_computed_block("Fine–Gray model", model, level=3))
    elif model:
        rows = [
            [
                cell(_term_label(t)),
                num(t["coef"], format_nonzero(t["coef"], 3)),
                num(t["se"], format_nonzero(t["se"], 3)),
                num(t["hazard_ratio"], format_ratio(t["hazard_ratio"])),
                interval(t["lower"], t["upper"], format_ratio),
                num(t["p_value"], format_p(t["p_value"])),
            ]
            for t in model["terms"]
        ]
        robust = model.get("variance", "robust") == "robust"
        variance_words = "robust (sandwich)" if robust else "model-based"
        se_header = "SE (robust)" if robust else "SE (model-based)"
        parts += [
            f"<h3>Fine–Gray model: {escape(model['cause'])}</h3>",
            f'<p class="meta">{model["n"]:,} rows used, {model["events"]:,} events of this '
            f"cause, {model['competing_events']:,} competing events, {model['censored']:,} "
            f"censored; {variance_words} standard errors.</p>",
            table(
                ["Term", "Coefficient", se_header, "Subdistribution HR", f"{ci} CI", "p"],
                rows,
            ),
            figure_block(forest, "Subdistribution hazard ratios with their intervals (log scale)."),
            f"<p><strong>Reading it.</strong> {escape(model['meaning'])}</p>",
        ]
        for warning in model.get("warnings") or ():
            parts.append(f"<p><strong>Note.</strong> {escape(warning)}</p>")
        if model.get("typical_at_times"):
            parts.append(
                table(
                    [f"Time ({unit})", "Predicted cumulative incidence"],
                    (
                        [
                            num(r["time"], format_plain(r["time"])),
                            num(
                                r["cumulative_incidence"],
                                format_number(r["cumulative_incidence"], 3),
                            ),
                        ]
                        for r in model["typical_at_times"]
                    ),
                    caption="For a subject with numeric covariates at their mean and categorical "
                    "ones at their reference level.",
                )
            )
    return "\n".join(p for p in parts if p)


@or_reason("Prediction performance of the Cox model")
def performance_section(section: Mapping | None, unit: str, figure) -> str:
    if not section:
        return ""
    rows = [
        [
            num(t, format_plain(t)),
            num(auc, format_number(auc, 3)),
            num(brier, format_number(brier, 3)),
            num(km, format_number(km, 3)),
        ]
        for t, auc, brier, km in zip(
            section["times"], section["auc"], section["brier"], section["brier_km"], strict=True
        )
    ]
    start, end = section["integration_range"]
    parts = [
        "<h2>Prediction performance of the Cox model</h2>",
        "<p>Measured on the rows the model was fitted to; the risk score is the model's linear "
        "predictor.</p>",
        "<ul>"
        f"<li>Harrell's C: {escape(format_number(section['harrell_c'], 3))}</li>"
        f"<li>Uno's C (censoring-weighted, up to {escape(format_plain(section['tau']))} "
        f"{escape(unit)}): {escape(format_number(section['uno_c'], 3))}</li>"
        f"<li>Integrated Brier score from {escape(format_plain(start))} to "
        f"{escape(format_plain(end))} {escape(unit)}: "
        f"{escape(format_number(section['integrated_brier'], 3))} (Kaplan–Meier curve without "
        f"covariates: {escape(format_number(section['integrated_brier_km'], 3))}; lower is "
        "better)</li></ul>",
        table(
            [f"Time ({unit})", "AUC", "Brier score", "Brier score, Kaplan–Meier only"],
            rows,
            caption="Cumulative/dynamic AUC: cases had the event by the time, controls are "
            "event-free after it.",
        ),
        f"<h3>Calibration at {escape(format_plain(section['calibration_time']))} "
        f"{escape(unit)}</h3>",
        figure_block(
            figure,
            "Observed (Kaplan–Meier) against mean predicted survival per risk "
            "group; dashed: perfect calibration.",
        ),
        table(
            ["Risk group", "Subjects", "Events", "Predicted", "Observed", "Interval"],
            (
                [
                    cell(r["risk_group"]),
                    num(r["n"], f"{r['n']:,}"),
                    num(r["events"], f"{r['events']:,}"),
                    num(r["predicted"], format_number(r["predicted"], 3)),
                    num(r["observed"], format_number(r["observed"], 3)),
                    interval(r["lower"], r["upper"], lambda v: format_number(v, 3)),
                ]
                for r in section["calibration"]
            ),
            caption="Group 1 holds the highest predicted risk.",
        ),
    ]
    optimism = section.get("optimism")
    if optimism:
        parts.append(
            "<h3>Corrected for optimism (bootstrap)</h3>"
            f"<p>Over {optimism['replicates']:,} bootstrap replicates (seed {optimism['seed']}): "
            f"C {escape(format_number(optimism['c_apparent'], 3))} on the fitting data, "
            f"{escape(format_number(optimism['c'], 3))} corrected for optimism; calibration "
            f"slope {escape(format_number(optimism['slope'], 3))} (below 1: predictions too "
            "extreme for new patients).</p>"
        )
    return "\n".join(p for p in parts if p)
