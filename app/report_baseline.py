"""The report's baseline table (``engine.analysis.baseline``), built from the JSON ``baseline``
section
with the same rounding as the Baseline table page."""

from __future__ import annotations

from collections.abc import Mapping

from app.report_html import cell, escape, num, or_reason, table
from engine.analysis.baseline import SMD_NOTE, TEST_CAUTION, BaselineTable, display_frame


@or_reason("Baseline table")
def baseline_section(
    section: Mapping | None, settings: Mapping, labels: Mapping[str, str] | None = None
) -> str:
    """Counts and percentages, medians (quartiles) or means (SD), missing values; each cell's
    leading number unrounded in its ``data-value``."""
    if not section or not section.get("rows"):
        return ""
    summary = (settings.get("baseline") or {}).get("summary", "median")
    result = BaselineTable.from_dict(section, summary=summary)
    shown = display_frame(result, labels=labels)
    exact = display_frame(result, labels=labels, exact=True)
    rows = []
    for (_, texts), (_, values) in zip(shown.iterrows(), exact.iterrows(), strict=True):
        line = [cell(texts.iloc[0]), cell(texts.iloc[1])]
        for text, value in zip(texts.iloc[2:], values.iloc[2:], strict=True):
            line.append(num(value, text) if value is not None else cell(text))
        rows.append(line)
    by = f" by {section['group']}" if section.get("group") else ""
    parts = [
        f"<h2>Baseline table{escape(by)}</h2>",
        "<p>Percentages are of the non-missing values in each group; rows without a group "
        "count under all rows only. The table describes the rows the analyses use.</p>",
        table(list(shown.columns), rows),
    ]
    if result.compare == "test":
        parts.append(f"<p><strong>Caution.</strong> {escape(TEST_CAUTION)}</p>")
    elif result.compare == "smd":
        parts.append(f"<p>{escape(SMD_NOTE)}</p>")
    return "\n".join(parts)
