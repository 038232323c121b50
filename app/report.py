"""One self-contained HTML report of an analysis, to attach to an email or keep with a paper.

The report is built from the same JSON object the command line writes (``schema`` 1: ``data``,
``curves``, ``comparison``, ``cox``) plus figures, so every number in it is one of the JSON's
numbers, rounded by ``engine.wording``'s rules; each numeric cell keeps the exact value in a
``data-value`` attribute. The file loads nothing: the style sheet is inline, figures are inline
SVG (rendered by vl-convert from the app's Altair charts) with every address removed, and every
string that came from the user or the data is HTML-escaped.
"""

from __future__ import annotations

import datetime as dt
import html
import re
from collections.abc import Iterable, Mapping, Sequence

from engine.recipe import software_versions
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
PH_TRANSFORM_WORDS = {
    "km": "the Kaplan–Meier transform of time",
    "rank": "the ranks of the event times",
    "identity": "time itself",
    "log": "log time",
}
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


# --- escaping and small pieces -----------------------------------------------------------------


def escape(value: object) -> str:
    """HTML-escape any text shown in the report, and defuse web addresses.

    Addresses (``http://``, ``https://``) are broken with a zero-width space so nothing in the
    report can be read as a link or a resource to fetch, even where user text contains one.
    """
    text = html.escape("" if value is None else str(value), quote=True)
    return re.sub(r"(?i)(https?|ftp):(//)", r"\1:&#8203;\2", text)


def _cell(value: object, text: str | None = None, numeric: bool = False) -> str:
    if numeric:
        exact = "" if value is None else escape(repr(value) if isinstance(value, float) else value)
        return f'<td class="num" data-value="{exact}">{escape(text)}</td>'
    return f"<td>{escape(value if text is None else text)}</td>"


def _num(value, text: str) -> str:
    return _cell(value, text, numeric=True)


def _table(headers: Sequence[str], rows: Iterable[Sequence[str]], caption: str = "") -> str:
    """``rows`` are lists of ready ``<td>`` strings (built with ``_cell`` / ``_num``)."""
    head = "".join(f"<th>{escape(h)}</th>" for h in headers)
    body = "".join(f"<tr>{''.join(r)}</tr>" for r in rows)
    cap = f"<caption>{escape(caption)}</caption>" if caption else ""
    return (
        f'<div class="wide"><table>{cap}<thead><tr>{head}</tr></thead>'
        f"<tbody>{body}</tbody></table></div>"
    )


def _list(items: Iterable[str], css: str = "") -> str:
    items = list(items)
    if not items:
        return ""
    cls = f' class="{css}"' if css else ""
    return f"<ul{cls}>" + "".join(f"<li>{escape(i)}</li>" for i in items) + "</ul>"


def _label(group) -> str:
    return "All rows" if group is None else str(group)


# --- figures -----------------------------------------------------------------------------------

_ADDRESS_ATTRIBUTE = re.compile(r"""\s[\w:-]+\s*=\s*(["'])\s*(?:https?:|ftp:|//)[^"']*\1""", re.I)
_SCRIPT = re.compile(r"<script\b.*?</script\s*>", re.I | re.S)
_EVENT_ATTRIBUTE = re.compile(r"""\son\w+\s*=\s*(["']).*?\1""", re.I | re.S)
_XML_PROLOGUE = re.compile(r"<\?xml[^>]*\?>|<!DOCTYPE[^>]*>", re.I)


def sanitize_svg(svg: str) -> str:
    """SVG fit to inline in the report: no namespace addresses, links, scripts or handlers.

    Inline SVG in HTML needs no ``xmlns``; vl-convert writes the SVG and XLink namespace URLs,
    which are the only addresses its output holds. Anything else that points outside is
    removed too, and text (already XML-escaped by vl-convert) has its addresses defused.
    """
    svg = _XML_PROLOGUE.sub("", svg)
    svg = _SCRIPT.sub("", svg)
    svg = _EVENT_ATTRIBUTE.sub("", svg)
    svg = _ADDRESS_ATTRIBUTE.sub("", svg)
    svg = re.sub(r"(?i)url\(\s*['\"]?\s*(?:https?:|//)[^)]*\)", "none", svg)
    return re.sub(r"(?i)(https?|ftp):(//)", r"\1:&#8203;\2", svg).strip()


_INVISIBLE_MARK = re.compile(r"""<path(?=[^>]*\sopacity="0")[^>]*/>""")
_MARK_ARIA = re.compile(r'\s(?:aria-label|aria-roledescription|role)="[^"]*"')


def compact_svg(svg: str) -> str:
    """Drop what only an interactive chart uses: invisible hover targets and per-mark labels.

    A Kaplan–Meier figure on a large dataset keeps a transparent point per vertex for tooltips,
    each with a spoken description; on paper they are two thirds of the file.
    """
    svg = _INVISIBLE_MARK.sub("", svg)
    return _MARK_ARIA.sub("", svg).replace("<svg ", '<svg role="img" ', 1)


def figure_svg(figure) -> str:
    """An Altair chart, a Vega-Lite dict or ready SVG text, as sanitised inline SVG."""
    if isinstance(figure, str):
        return sanitize_svg(figure)
    # imported here: the command line loads this module without drawing anything
    import altair as alt

    from app import exports

    # The data were thinned to what can be seen, yet several curves together can pass
    # Altair's 5,000-row guard; lift it for this conversion only (restored on exit).
    with alt.data_transformers.enable("default", max_rows=None):
        svg = exports.figure_svg(figure)
    return compact_svg(sanitize_svg(svg))


def _figure(figure, caption: str) -> str:
    if figure is None:
        return ""
    return f"<figure>{figure_svg(figure)}<figcaption>{escape(caption)}</figcaption></figure>"


# --- sections ----------------------------------------------------------------------------------


def _data_section(data: Mapping, fingerprint: Mapping | None, filters: Sequence[Mapping]) -> str:
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
        _table(
            ["", "Count"],
            ([_cell(name), _num(value, f"{value:,}")] for name, value in counts),
        )
    )
    parts.append(f"<p>Times are in {escape(unit)}.</p>")
    if filters:
        parts.append("<h3>Rows left out by filters (before the data checks)</h3>")
        parts.append(
            _table(
                ["Filter", "Rows"],
                ([_cell(f["filter"]), _num(f["rows"], f"{f['rows']:,}")] for f in filters),
            )
        )
    excluded = data.get("excluded", [])
    parts.append("<h3>Rows left out by the data checks</h3>")
    if excluded:
        parts.append(
            _table(
                ["Reason", "Rows"],
                ([_cell(e["reason"]), _num(e["rows"], f"{e['rows']:,}")] for e in excluded),
            )
        )
    else:
        parts.append("<p>None: every row read was used.</p>")
    return "\n".join(parts)


def _roles_section(roles: Mapping | None) -> str:
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
        rows.append([_cell(words), _cell(value)])
    return "<h2>Column roles</h2>\n" + _table(["Role", "Column or value"], rows)


def _interval(lower, upper, fmt) -> str:
    """An interval cell, kept on one line."""
    return f'<td class="ci">{escape(fmt(lower))} to {escape(fmt(upper))}</td>'


def _curves_section(curves: Sequence[Mapping], unit: str, confidence: float, figure) -> str:
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
            _cell(_label(c["group"])),
            _num(c["n"], f"{c['n']:,}"),
            _num(c["events"], f"{c['events']:,}"),
            _num(c["n"] - c["events"], f"{c['n'] - c['events']:,}"),
            _num(median["estimate"], format_number(median["estimate"], missing=NOT_REACHED)),
            _interval(
                median["lower"], median["upper"], lambda v: format_number(v, missing=NOT_REACHED)
            ),
        ]
        sentences += curve_sentences(c, unit, confidence)
        for point in c.get("at_times", []):
            row += [
                _num(point["survival"], format_percent(point["survival"])),
                _interval(point["lower"], point["upper"], format_percent),
                _num(point["at_risk"], f"{point['at_risk']:,}"),
            ]
        if has_rmst:
            rmst = c.get("rmst") or {}
            row += [
                _num(rmst.get("estimate"), format_number(rmst.get("estimate"))),
                _interval(rmst.get("lower"), rmst.get("upper"), format_number),
            ]
        rows.append(row)
    parts = [
        "<h2>Survival curves</h2>",
        _figure(
            figure,
            f"Kaplan–Meier estimates with pointwise {ci} confidence bands; the table under the "
            "plot gives the numbers at risk.",
        ),
        "<h3>Summary by group</h3>",
        _table(headers, rows, caption=f"Times in {unit}; survival in per cent."),
        "<h3>Text for a manuscript</h3>",
        _list(sentences, "sentences"),
    ]
    return "\n".join(p for p in parts if p)


def _generic_rows(records: Sequence[Mapping]) -> tuple[list[str], list[list[str]]]:
    """A table of plain records (for optional extra results): numbers rounded, text escaped."""
    headers = list(dict.fromkeys(k for r in records for k in r))
    rows = []
    for r in records:
        row = []
        for key in headers:
            value = r.get(key)
            if isinstance(value, bool) or not isinstance(value, int | float):
                row.append(_cell("" if value is None else value))
            elif isinstance(value, int):
                row.append(_num(value, f"{value:,}"))
            elif key == "p" or key.startswith("p_") or key.endswith(("_p", "p_value")):
                row.append(_num(value, format_p(value)))
            else:
                row.append(_num(value, format_number(value, 2)))
        rows.append(row)
    return [h.replace("_", " ") for h in headers], rows


def _test_table(tests: Sequence[tuple[str, Mapping | None]], first: str = "Test") -> str:
    rows = []
    for name, t in tests:
        if not t:
            continue
        rows.append(
            [
                _cell(name),
                _num(t.get("statistic"), format_number(t.get("statistic"), 2)),
                _num(t.get("df"), "" if t.get("df") is None else format_plain(t["df"])),
                _num(t.get("p_value"), format_p(t.get("p_value"))),
            ]
        )
    return _table([first, "Chi-squared", "df", "p"], rows) if rows else ""


def _comparison_section(comparison: Mapping | None, pairwise) -> str:
    if not comparison:
        return ""
    name = comparison["test"]
    parts = [
        "<h2>Group comparison</h2>",
        _test_table([(name, comparison)]),
        "<p>"
        + escape(
            comparison_sentence(
                name, comparison["statistic"], comparison["df"], comparison["p_value"]
            )
        )
        + " A test that does not reach significance does not show that the groups are the "
        "same.</p>",
    ]
    if pairwise:
        headers, rows = _generic_rows(pairwise)
        parts += ["<h3>Pairwise comparisons</h3>", _table(headers, rows)]
    return "\n".join(parts)


def _term_label(term: Mapping) -> str:
    if term.get("level") is None:
        return str(term["variable"])
    return f"{term['variable']}: {term['level']} (vs {term.get('reference')})"


def _cox_section(cox: Mapping | None, confidence: float, forest) -> str:
    if not cox:
        return ""
    ci = format_confidence(confidence)
    rows = []
    for term in cox["terms"]:
        rows.append(
            [
                _cell(_term_label(term)),
                _num(term["coef"], format_number(term["coef"], 3)),
                _num(term["se"], format_number(term["se"], 3)),
                _num(term["hazard_ratio"], format_ratio(term["hazard_ratio"])),
                _interval(term["lower"], term["upper"], format_ratio),
                _num(term["p_value"], format_p(term["p_value"])),
            ]
        )
    parts = [
        "<h2>Cox proportional-hazards model</h2>",
        f'<p class="meta">{cox["n"]:,} rows used, {cox["events"]:,} events; tied times by the '
        f"{escape(str(cox.get('ties', '')).capitalize())} method.</p>",
        _table(["Term", "Coefficient", "SE", "Hazard ratio", f"{ci} CI", "p"], rows),
        _figure(forest, "Hazard ratios with their intervals on a log scale."),
        "<h3>Whole-model tests</h3>",
        _test_table(
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
            _test_table([(d["variable"], d) for d in drop_one], "Variable removed"),
        ]
    parts += ["<h3>Text for a manuscript</h3>", _list(cox_sentences(cox, confidence), "sentences")]
    return "\n".join(p for p in parts if p)


def _quote(value) -> str:
    return '"' + escape("" if value is None else repr(value)) + '"'


def _ph_section(cox: Mapping | None) -> str:
    checks = (cox or {}).get("ph_check") or []
    if not checks:
        return ""
    return (
        "<h2>Proportional-hazards checks</h2>\n"
        + _test_table([(c["variable"], c) for c in checks], "Variable")
        + "<p>A small p-value suggests the hazard ratio of that variable changes over time; look "
        "at its residual plot before trusting a single hazard ratio.</p>"
    )


def methods_paragraph(results: Mapping, settings: Mapping, software: Mapping[str, str]) -> str:
    """The methods, written from the settings actually used (plain text)."""
    curves = {"ci_transform": "log-log", "confidence": 0.95, **settings.get("curves", {})}
    ci = format_confidence(curves["confidence"])
    transform = TRANSFORM_WORDS.get(curves["ci_transform"], curves["ci_transform"])
    unit = results.get("data", {}).get("time_unit", "")
    text = [
        f"Survival was estimated with the Kaplan–Meier method, with time measured in {unit}. "
        f"Pointwise {ci} confidence intervals used Greenwood's variance with {transform}. "
        "Median survival and its interval were read from the curve and its confidence band "
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
    if comparison:
        df = format_plain(comparison["df"])
        freedom = "degree" if df == "1" else "degrees"
        text.append(
            f"Groups were compared with the {comparison['test']} test ({df} {freedom} of freedom)."
        )
    cox = results.get("cox")
    if cox:
        ties = cox.get("ties") or settings.get("cox", {}).get("ties", "efron")
        ph = settings.get("cox", {}).get("ph_transform", "km")
        text.append(
            "Hazard ratios were estimated with a Cox proportional-hazards model "
            f"({ties.capitalize()} method for tied event times), categorical covariates coded "
            "against their reference level, using complete cases on the model's variables; "
            "intervals and p-values are from Wald statistics. Proportional hazards were checked "
            "with the Grambsch–Therneau test on scaled Schoenfeld residuals against "
            f"{PH_TRANSFORM_WORDS.get(ph, ph)}."
        )
    names = {"python": "Python", "numpy": "NumPy", "pandas": "pandas", "scipy": "SciPy"}
    versions = ", ".join(f"{names.get(n, n)} {version}" for n, version in software.items())
    text.append(f"Analyses were run in Hazel ({versions}).")
    return " ".join(text)


# --- optional analyses (competing risks, parametric, sample size, landmark) ---------------------


def _ci_cells(row: Mapping, estimate: str, fmt) -> list[str]:
    return [
        _num(row.get(estimate), fmt(row.get(estimate))),
        _interval(row["lower"], row["upper"], fmt),
    ]


def _competing_section(section: Mapping | None, unit: str, ci: str, figure) -> str:
    if not section:
        return ""
    rows = [
        [
            _cell(_label(r["group"])),
            _cell(r["cause"]),
            *_ci_cells(r, "cumulative_incidence", format_percent),
            _num(r["one_minus_km"], format_percent(r["one_minus_km"])),
            _num(r["time"], format_number(r["time"])),
        ]
        for r in section["at_end"]
    ]
    parts = [
        "<h2>Competing risks</h2>",
        "<p>Causes: " + escape(", ".join(section["causes"])) + ".</p>",
        _figure(figure, f"Cumulative incidence per cause (Aalen–Johansen) with {ci} bands."),
        _table(
            ["Group", "Cause", "Cumulative incidence", f"{ci} CI", "1 − KM", f"At time ({unit})"],
            rows,
            caption="At the end of follow-up. 1 − KM treats other causes as censored.",
        ),
    ]
    if section.get("warning"):
        parts.append(f"<p><strong>Note.</strong> {escape(section['warning'])}</p>")
    if section.get("at_times"):
        parts.append(
            _table(
                ["Group", "Cause", f"Time ({unit})", "Cumulative incidence", f"{ci} CI"],
                (
                    [
                        _cell(_label(r["group"])),
                        _cell(r["cause"]),
                        _num(r["time"], format_plain(r["time"])),
                        *_ci_cells(r, "cumulative_incidence", format_percent),
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
            _table(
                ["Term", "Hazard ratio", f"{ci} CI", "p"],
                (
                    [
                        _cell(_term_label(t)),
                        _num(t["hazard_ratio"], format_ratio(t["hazard_ratio"])),
                        _interval(t["lower"], t["upper"], format_ratio),
                        _num(t["p_value"], format_p(t["p_value"])),
                    ]
                    for t in model["terms"]
                ),
            )
        )
    return "\n".join(p for p in parts if p)


def _parametric_section(section: Mapping | None, unit: str, ci: str, figure) -> str:
    if not section:
        return ""
    from engine.parametric import LABELS  # model names as people write them

    aic = [
        [
            _cell(_label(r["group"])),
            _cell(LABELS.get(r["distribution"], r["distribution"])),
            _num(r["n_parameters"], str(r["n_parameters"])),
            _num(r["log_likelihood"], format_number(r["log_likelihood"], 2)),
            _num(r["aic"], format_number(r["aic"], 2)),
            _num(r["delta_aic"], format_number(r["delta_aic"], 2)),
        ]
        for r in section["aic_table"]
    ]
    estimates = []
    for r in section["estimates"]:
        what = "Median" if r["quantity"] == "median" else f"Survival at {format_plain(r['time'])}"
        fmt = format_number if r["quantity"] == "median" else format_percent
        estimates.append(
            [
                _cell(_label(r["group"])),
                _cell(LABELS.get(r["distribution"], r["distribution"])),
                _cell(what),
                *_ci_cells(r, "estimate", fmt),
                _cell("extrapolated" if r["extrapolated"] else ""),
            ]
        )
    parts = [
        "<h2>Parametric models</h2>",
        _figure(
            figure,
            "Fitted survival over the Kaplan–Meier estimate; dashed beyond the last observed "
            "time, where the curve is extrapolation from the model's shape, not data.",
        ),
        _table(["Group", "Model", "Parameters", "Log-likelihood", "AIC", "Δ AIC"], aic),
        _table(
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
            _table(
                ["Term", "Time ratio", f"{ci} CI", "p"],
                (
                    [
                        _cell(c["term"]),
                        _num(c.get("time_ratio"), format_ratio(c.get("time_ratio"))),
                        _interval(
                            c.get("time_ratio_lower"), c.get("time_ratio_upper"), format_ratio
                        ),
                        _num(c.get("p_value"), format_p(c.get("p_value"))),
                    ]
                    for c in aft["coefficients"]
                    if c["term"] != "Intercept"
                ),
            )
        )
    return "\n".join(p for p in parts if p)


def _sample_size_section(section: Mapping | None) -> str:
    if not section:
        return ""
    rows = [
        [
            _cell(r["method"].capitalize()),
            _num(r["hazard_ratio"], format_plain(r["hazard_ratio"])),
            _num(r["power"], format_percent(r["power"])),
            _num(r["alpha"], format_plain(r["alpha"])),
            _num(r["allocation_ratio"], format_plain(r["allocation_ratio"])),
            _num(r["events"], f"{r['events']:,}"),
            _num(r["subjects"], f"{r['subjects']:,}"),
        ]
        for r in section["needed"]
    ]
    parts = [
        "<h2>Sample size and power</h2>",
        _table(
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


def _landmark_section(section: Mapping | None, unit: str, ci: str) -> str:
    if not section:
        return ""
    parts = [
        "<h2>Landmark analysis from "
        f"{escape(format_plain(section['landmark']))} {escape(unit)}</h2>",
        f"<p>{section['n_kept']:,} subjects still at risk at the landmark are analysed; "
        f"{section['n_excluded']:,} are left out (event or censoring before it, or entry "
        "after it). Times are measured from the landmark.</p>",
        _table(
            ["Group", "Rows", "Kept", "Event before", "Censored before", "Entered after"],
            (
                [_cell(_label(r["group"]))]
                + [
                    _num(r[k], f"{r[k]:,}")
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
        _list((s for c in section["curves"] for s in curve_sentences(c, unit)), "sentences"),
    ]
    comparison = section.get("comparison")
    if comparison:
        parts.append(_test_table([(comparison["test"], comparison)]))
    return "\n".join(p for p in parts if p)


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
) -> str:
    """The report as one HTML document (a string).

    ``results`` is the command line's JSON object (schema 1), optionally with ``pairwise`` (a
    list of records) beside ``comparison`` and ``rmst`` in curve entries; ``settings`` maps each
    analysis to its settings (``Recipe.settings()``); ``roles`` is ``Roles.to_dict()``;
    ``figures`` may hold ``"curves"`` (the Kaplan–Meier figure with numbers at risk) and
    ``"forest"`` as Altair charts, Vega-Lite dicts or SVG text; ``fingerprint`` is
    ``ImportedTable.fingerprint()`` plus ``file_name``; ``filters`` is
    ``FilterOutcome.to_dict()["excluded"]``; ``warnings`` are extra warnings such as
    fingerprint differences from a replayed recipe.
    """
    figures = dict(figures or {})
    software = dict(software or software_versions())
    generated = generated or dt.datetime.now().astimezone()
    data = results.get("data") or {}
    unit = data.get("time_unit", "")
    confidence = float(settings.get("curves", {}).get("confidence", 0.95))
    cox = results.get("cox")
    all_warnings = [
        *warnings,
        *data.get("warnings", []),
        *((cox or {}).get("warnings", [])),
    ]
    body = [
        "<header>",
        f"<h1>{escape(title)}</h1>",
        f'<p class="meta">Written by Hazel on {escape(generated.strftime("%Y-%m-%d %H:%M %Z"))}.'
        "</p>",
        "</header>",
        '<section class="cautions"><strong>Before you read</strong>',
        _list(CAUTIONS),
        "</section>",
        _data_section(data, fingerprint, filters) if data else "",
        _roles_section(roles),
        _curves_section(results.get("curves") or [], unit, confidence, figures.get("curves")),
        _comparison_section(results.get("comparison"), results.get("pairwise")),
        _cox_section(cox, confidence, figures.get("forest")),
        _ph_section(cox),
        _competing_section(
            results.get("competing"), unit, format_confidence(confidence), figures.get("competing")
        ),
        _parametric_section(
            results.get("parametric"),
            unit,
            format_confidence(confidence),
            figures.get("parametric"),
        ),
        _sample_size_section(results.get("sample_size")),
        _landmark_section(results.get("landmark"), unit, format_confidence(confidence)),
        "<h2>Warnings</h2>",
        _list(all_warnings, "warnings") or "<p>None.</p>",
        "<h2>Methods</h2>",
        f"<p>{escape(methods_paragraph(results, settings, software))}</p>",
        '<section class="cautions"><strong>Cautions</strong>',
        _list(CAUTIONS),
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
