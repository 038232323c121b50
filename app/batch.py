"""Replaying a recipe and writing the HTML report, for the command line and the app's download.

Nothing here imports streamlit; Altair and vl-convert load only when a figure is drawn, so the
command line starts quickly. The JSON sections come from ``engine.analysis.run.run_analysis``
(through ``app.cli.run_analysis``); the settings from the command line from
``app.cli.settings_from_args``.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from engine.analysis.recipe import (
    ANALYSIS_DEFAULTS,
    MAX_RECIPE_BYTES,
    DataFingerprint,
    Recipe,
    RecipeError,
    check_fingerprint,
    software_versions,
)
from engine.errors import HazelError
from engine.io.tables import ImportedTable, ImportOptions, read_table
from engine.prepare.checks import PreparedData, prepare
from engine.prepare.filters import FilterOutcome, apply_filters
from engine.prepare.roles import Roles, event_in_words
from engine.survival.curves import curves_by_group
from engine.survival.summary import numbers_at_risk_frame
from engine.wording import probability_title

ALL_ROWS = "All rows"  # the label of the all-rows curve, as app.charts.ALL_ROWS_LABEL
SURVIVAL, INCIDENCE, HAZARD = "survival", "incidence", "hazard"  # scales a curve is drawn on
REPORT_SIZE = (640, 320)  # figure width and height in the report, pixels


class OutputError(HazelError):
    """A result file cannot be written."""


@dataclass(frozen=True, eq=False)
class RecipeRun:
    """A recipe applied to a data file, ready for ``run_analysis``.

    Unpacks as ``imported, prepared, settings, warnings``; ``recipe`` and ``filtered`` (the rows
    each filter removed, for the report) are there for whoever needs them.
    """

    imported: ImportedTable
    prepared: PreparedData
    settings: dict
    warnings: list[str]
    recipe: Recipe
    filtered: FilterOutcome

    def __iter__(self) -> Iterator:
        return iter((self.imported, self.prepared, self.settings, self.warnings))

    @property
    def source(self) -> pd.DataFrame:
        """The rows the filters kept, as read: the frame ``prepare`` was given (a comparison
        cut or a strata column is read from it)."""
        return self.filtered.frame


def read_recipe(path: str | Path) -> Recipe:
    """A recipe file, or a RecipeError naming the file."""
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > MAX_RECIPE_BYTES:
            raise RecipeError(
                f"{path.name} is {size:,} bytes; a Hazel recipe holds settings only and is far "
                f"smaller (limit {MAX_RECIPE_BYTES:,}). Did you give the data file as the recipe?"
            )
        text = path.read_bytes()
    except OSError as exc:
        raise RecipeError(f"cannot read the recipe {path}: {exc.strerror or exc}") from None
    try:
        return Recipe.from_json(text)
    except RecipeError as exc:
        raise RecipeError(f"{path.name}: {exc}") from None


def apply_recipe(recipe: Recipe, imported: ImportedTable) -> RecipeRun:
    """Filters, roles and checks of ``recipe`` on a table already read."""
    warnings = check_fingerprint(recipe, imported)
    warnings += import_option_differences(recipe, imported)
    filtered = apply_filters(imported.frame, recipe.filters).refuse_if_empty()
    prepared = prepare(filtered.frame, Roles.from_dict(recipe.roles))
    return RecipeRun(imported, prepared, recipe.settings(), warnings, recipe, filtered)


def load_recipe_run(recipe_path: str | Path, data_path: str | Path) -> RecipeRun:
    """Read the data as the recipe says, apply its filters and roles, and say what differs.

    Fingerprint differences (another file, other rows or columns) are warnings, not errors: the
    caller shows them beside the results so nobody mistakes them for the original numbers.
    """
    recipe = read_recipe(recipe_path)
    imported = read_table(Path(data_path), ImportOptions.from_dict(recipe.import_options))
    return apply_recipe(recipe, imported)


def import_option_differences(recipe: Recipe, imported: ImportedTable) -> list[str]:
    """Import options the recipe names that differ from those the table was read with."""
    used = imported.options.to_dict()
    out = []
    for key in ("sep", "decimal", "encoding", "sheet", "missing_tokens"):
        wanted = recipe.import_options.get(key)
        if wanted is None or key not in used:
            continue
        if _comparable(wanted) != _comparable(used[key]):
            out.append(
                f"The recipe reads the file with {key} = {wanted!r}; the table in use was read "
                f"with {used[key]!r}. Re-import the file with the recipe's options to repeat it."
            )
    return out


def _comparable(value):
    return list(value) if isinstance(value, list | tuple) else value


# --- figures -----------------------------------------------------------------------------------


def _label(label: object) -> str:
    return ALL_ROWS if label is None else str(label)


def curve_rows(curve, scale: str = SURVIVAL) -> pd.DataFrame:
    """One drawing row per vertex, starting at time 0 (where every curve starts)."""
    if scale == HAZARD:
        estimate, lower, upper = curve.cumulative_hazard, curve.lower, curve.upper
        start = 0.0
    elif scale == INCIDENCE:
        incidence = curve.incidence_frame()  # the engine's 1 − S and its reflected interval
        estimate = incidence["incidence"].to_numpy()
        lower, upper = incidence["lower"].to_numpy(), incidence["upper"].to_numpy()
        start = 0.0
    else:
        estimate, lower, upper = curve.survival, curve.lower, curve.upper
        start = 1.0
    time = np.asarray(curve.time, dtype=float)
    at_risk = np.asarray(curve.at_risk)
    prepend = time.size == 0 or time[0] > 0
    if prepend:
        first_at_risk = int(at_risk[0]) if at_risk.size else 0
        time = np.concatenate([[0.0], time])
        estimate = np.concatenate([[start], estimate])
        lower = np.concatenate([[start], lower])
        upper = np.concatenate([[start], upper])
        at_risk = np.concatenate([[first_at_risk], at_risk])
    return pd.DataFrame(
        {
            "group": _label(curve.label),
            "time": time,
            "estimate": estimate,
            "lower": lower,
            "upper": upper,
            "at_risk": at_risk,
        }
    )


def censoring_marks(
    censor_source: Sequence,
    drawn: Sequence,
    scale: str,
    x_domain: tuple[float, float],
    y_domain: tuple[float, float],
    size_px: tuple[int, int],
) -> pd.DataFrame:
    """Censoring marks (group, time, estimate) of each curve in ``censor_source`` on the drawn
    curve with the same label, thinned to one mark per pixel and group."""
    from app import thinning

    drawn_by_label = {_label(c.label): c for c in drawn}
    marks = []
    for curve in censor_source:
        has = np.asarray(curve.censored) > 0
        on = drawn_by_label.get(_label(curve.label))
        if on is None or not has.any():
            continue
        times = np.asarray(curve.time, dtype=float)[has]
        # A censoring mark sits on the drawn curve at its time.
        on_rows = curve_rows(on, scale)
        index = np.searchsorted(on_rows["time"].to_numpy(), times, side="right") - 1
        marks.append(
            pd.DataFrame(
                {
                    "group": _label(curve.label),
                    "time": times,
                    "estimate": on_rows["estimate"].to_numpy()[np.clip(index, 0, None)],
                }
            )
        )
    if not marks:
        return pd.DataFrame(columns=["group", "time", "estimate"])
    return thinning.thin_points(
        pd.concat(marks, ignore_index=True), "time", "estimate", x_domain, y_domain, size_px,
        group="group",
    )  # fmt: skip


def curve_figure(prepared: PreparedData, settings: Mapping, *, title: str = ""):
    """The Kaplan–Meier figure with its numbers-at-risk table, drawn by the app's builders."""
    curve_settings = {**ANALYSIS_DEFAULTS["curves"], **settings.get("curves", {})}
    frame = prepared.frame
    curves = curves_by_group(
        frame, confidence=curve_settings["confidence"], transform=curve_settings["ci_transform"]
    ).curves

    def at_risk(ticks, by_group):
        return numbers_at_risk_frame(frame, ticks, by_group=by_group).to_frame()

    return drawn_curve_figure(curves, at_risk, prepared.report.time_unit, prepared.roles, title)


def aggregated_curve_figure(counts, settings: Mapping, unit: str, roles: Roles, title: str = ""):
    """The same figure from per-time counts (rows aggregated where they are)."""
    from engine.aggregate.estimators import curves_from_counts, numbers_at_risk_from_counts

    curve_settings = {**ANALYSIS_DEFAULTS["curves"], **settings.get("curves", {})}
    curves = curves_from_counts(
        counts, confidence=curve_settings["confidence"], transform=curve_settings["ci_transform"]
    ).curves

    def at_risk(ticks, by_group):
        return numbers_at_risk_from_counts(counts, ticks, by_group=by_group).to_frame()

    return drawn_curve_figure(curves, at_risk, unit, roles, title)


def drawn_curve_figure(curves, at_risk, unit: str, roles: Roles, title: str = ""):
    """Curves (all rows first, then each group) over their numbers at risk; ``at_risk(ticks,
    by_group)`` gives the table's frame at the figure's ticks."""
    from app import charts, thinning

    by_group = len(curves) > 1
    drawn = list(curves[1:] if by_group else curves[:1])
    rows = pd.concat([curve_rows(c) for c in drawn], ignore_index=True)
    width, height = REPORT_SIZE
    thinned = thinning.thin_step_frame(
        rows, ["estimate", "lower", "upper"], (0.0, 1.0), height, group="group"
    )
    x_max = float(rows["time"].max()) or 1.0
    marks = censoring_marks(drawn, drawn, SURVIVAL, (0.0, x_max), (0.0, 1.0), (width, height))
    censored_marks = marks if len(marks) else None
    ticks = charts.nice_ticks(x_max)
    labels = [str(c.label) for c in drawn] if by_group else []
    colours = charts.group_colours(labels)
    style = charts.ChartStyle(width=width, height=height).titled(
        title, f"Time ({unit})", probability_title(event_in_words(roles))
    )
    curve_chart = charts.step_curve_chart(
        thinned,
        style,
        colours,
        censored=censored_marks,
        x_max=x_max,
        ticks=ticks,
        legend_title=charts.group_title(roles.group) if roles.group else "",
        align_with_table=True,
    )
    risk = at_risk(ticks, by_group).rename(columns={"tick": "time"})
    risk["group"] = [ALL_ROWS if g is None else str(g) for g in risk["group"]]
    risk_chart = charts.at_risk_chart(risk, style, colours, x_max=x_max, ticks=ticks)
    return charts.finish(charts.curve_with_risk_table(curve_chart, risk_chart, style), style)


def forest_rows(cox: Mapping) -> pd.DataFrame:
    """Forest-plot rows from the JSON ``cox`` section: a reference row above each categorical,
    labelled as on the Regression page (``charts_models.forest_labels``)."""
    from engine.wording import format_p, term_label

    rows, seen = [], set()
    for term in cox["terms"]:
        variable, level, reference = term["variable"], term.get("level"), term.get("reference")
        if level is not None and variable not in seen and reference is not None:
            seen.add(variable)
            rows.append(
                {
                    "label": f"{variable}: {reference} (reference)",
                    "hazard_ratio": 1.0,
                    "lower": 1.0,
                    "upper": 1.0,
                    "is_reference": True,
                    "p_text": "",
                }
            )
        rows.append(
            {
                "label": term_label(variable, level, reference),
                "hazard_ratio": term["hazard_ratio"],
                "lower": term["lower"],
                "upper": term["upper"],
                "is_reference": False,
                "p_text": format_p(term["p_value"]),
            }
        )
    return pd.DataFrame(rows)


def forest_figure(cox: Mapping | None, confidence: float = 0.95, x_title: str = ""):
    """The forest plot of the Cox terms (or a Fine–Gray model's), or None without a model."""
    if not cox or not cox.get("terms"):
        return None
    from app import charts, charts_models

    style = charts.ChartStyle(width=int(REPORT_SIZE[0] * 0.7), height=REPORT_SIZE[1])
    if x_title:
        style = style.titled("", x_title)
    chart = charts_models.forest_chart(forest_rows(cox), style, confidence=confidence)
    return charts.finish(chart, style)


def calibration_figure(performance: Mapping | None):
    """Observed against predicted survival per risk group, from the JSON, or None."""
    if not performance or not performance.get("calibration"):
        return None
    from app import charts, charts_models

    style = charts.ChartStyle(width=REPORT_SIZE[0], height=REPORT_SIZE[1])
    chart = charts_models.calibration_chart(pd.DataFrame(performance["calibration"]), style)
    return charts.finish(chart, style)


def incidence_rows(result) -> pd.DataFrame:
    """Drawing rows (group, time, estimate, lower, upper, one_minus_km, at_risk) per cause and
    group of an ``engine.competing.incidence.CumulativeIncidence``, from time 0; the series label
    is the
    cause, or "group: cause" when split by group."""
    table = result.to_frame()
    pieces = []
    for (group, cause), rows in table.groupby(["group", "cause"], sort=False, dropna=False):
        label = str(cause) if group is None or pd.isna(group) else f"{group}: {cause}"
        first = rows["n_at_risk"].to_numpy()[:1]

        def from_zero(column: str, rows=rows) -> np.ndarray:
            return np.concatenate([[0.0], rows[column].to_numpy(dtype=float)])

        pieces.append(
            pd.DataFrame(
                {
                    "group": label,
                    "time": from_zero("time"),
                    "estimate": from_zero("cumulative_incidence"),
                    "lower": from_zero("lower"),
                    "upper": from_zero("upper"),
                    "one_minus_km": from_zero("one_minus_km"),
                    "at_risk": np.concatenate([first, rows["n_at_risk"].to_numpy()]),
                }
            )
        )
    return pd.concat(pieces, ignore_index=True)


def thinned_incidence(
    rows: pd.DataFrame, height_px: int
) -> tuple[tuple[float, float], pd.DataFrame, pd.DataFrame]:
    """The y domain and the vertices worth drawing at this height of the cumulative incidence
    and of 1 − KM (as ``estimate``), from `incidence_rows`."""
    from app import thinning

    top = float(max(rows["upper"].max(), rows["one_minus_km"].max(), 0.05))
    domain = (0.0, min(1.0, top * 1.05))
    cif = thinning.thin_step_frame(
        rows.drop(columns="one_minus_km"), ["estimate", "lower", "upper"], domain, height_px,
        group="group",
    )  # fmt: skip
    km = rows[["group", "time", "one_minus_km"]].rename(columns={"one_minus_km": "estimate"})
    km = thinning.thin_step_frame(km, ["estimate"], domain, height_px, group="group")
    return domain, cif, km


def incidence_figure(prepared: PreparedData, settings: Mapping):
    """Cumulative incidence per cause (and group) with bands, 1 − KM dotted, for the report."""
    from app import charts
    from engine.competing.incidence import cumulative_incidence

    chosen = settings.get("competing") or {}
    confidence = {**ANALYSIS_DEFAULTS["curves"], **settings.get("curves", {})}["confidence"]
    by_group = chosen.get("by_group", True)
    result = cumulative_incidence(prepared.frame, by_group=by_group, confidence_level=confidence)
    width, height = REPORT_SIZE
    domain, cif, km = thinned_incidence(incidence_rows(result), height)
    unit = prepared.report.time_unit
    style = charts.ChartStyle(width=width, height=height).titled(
        "", f"Time ({unit})", "Cumulative incidence"
    )
    series = list(dict.fromkeys(cif["group"]))
    chart = charts.incidence_chart(
        cif,
        style,
        charts.group_colours(series),
        one_minus_km=km,
        y_domain=domain,
        legend_title=charts.incidence_legend_title(
            prepared.roles.group if by_group and "_group" in prepared.frame else None
        ),
    )
    return charts.finish(chart, style)


def parametric_figure(prepared: PreparedData, settings: Mapping):
    """Fitted models over Kaplan–Meier (all rows), extrapolation dashed, for the report; None
    when the models were fitted per group (the tables hold those)."""
    from app import charts, charts_models, thinning
    from engine.parametric.fits import LABELS, fit_parametric

    chosen = {**ANALYSIS_DEFAULTS["parametric"], **(settings.get("parametric") or {})}
    if chosen["by_group"]:
        return None
    frame = prepared.frame
    result = fit_parametric(
        frame,
        distributions=tuple(chosen["distributions"]),
        horizon=chosen["horizon"],
        confidence_level=settings.get("curves", {}).get("confidence", 0.95),
    )
    width, height = REPORT_SIZE
    curve = curves_by_group(frame.drop(columns="_group", errors="ignore")).curves[0]
    km = thinning.thin_step_frame(curve_rows(curve), ["estimate"], (0.0, 1.0), height)
    fitted = result.curves.assign(distribution=result.curves["distribution"].map(LABELS))
    unit = prepared.report.time_unit
    style = charts.ChartStyle(width=width, height=height).titled(
        "", f"Time ({unit})", "Survival probability"
    )
    chart = charts_models.parametric_chart(
        km,
        fitted,
        style,
        max_time=float(frame["_time"].max()),
        x_max=float(fitted["time"].max()),
    )
    return charts.finish(chart, style)


DOT_LIMIT = 4000  # residual dots drawn in the report (a seeded sample beyond), as on the page


def residual_figure(
    prepared: PreparedData, settings: Mapping, source: pd.DataFrame | None = None
) -> tuple[str, dict] | None:
    """The scaled Schoenfeld residuals of the term whose proportional-hazards test has the
    smallest p-value, against time on the check's scale, as on the Regression page; None
    without a model. Returns the term's label and the figure."""
    from app import charts, charts_models
    from engine.analysis.run import fit_cox_from_settings
    from engine.cox.diagnostics import proportional_hazards_test, schoenfeld_residuals

    cox = {**ANALYSIS_DEFAULTS["cox"], **(settings.get("cox") or {})}
    result = fit_cox_from_settings(prepared, cox, source=source, without_each=False)
    residuals = schoenfeld_residuals(result, cox["ph_time_scale"])
    test = proportional_hazards_test(result, cox["ph_time_scale"], residuals=residuals)
    finite = [t for t in test.terms if t.p_value == t.p_value]
    if not finite:
        return None
    worst = min(finite, key=lambda t: t.p_value)
    points = residuals.points(worst.variable)
    if len(points) > DOT_LIMIT:
        points = points.sample(DOT_LIMIT, random_state=0)
    labels = [t.label for t in result.design.terms]
    coefficient = result.terms[labels.index(worst.variable)].coef
    width, height = REPORT_SIZE
    style = charts.ChartStyle(width=width, height=height)
    chart = charts_models.residual_chart(
        points,
        style,
        x_title=f"Time on the {cox['ph_time_scale']} scale",
        y_title=f"β(t) for {worst.variable}",
        zero_line=coefficient,
    )
    return worst.variable, charts.finish(chart, style)


def report_figures(
    prepared: PreparedData | None,
    results: Mapping,
    settings: Mapping,
    source: pd.DataFrame | None = None,
) -> dict:
    """The report's figures: ``curves`` (and ``competing``, ``parametric`` when those analyses
    ran, ``residuals`` with the model, labelled by ``residuals_term``) from the prepared data,
    ``forest`` from the JSON. A section that was not computed has no figure, and a figure that
    cannot be drawn is left out (its section says what it can)."""
    from engine.analysis.run import computed, is_not_computed

    def usable(section) -> bool:
        return bool(section) and not is_not_computed(section)

    drawers = {
        "curves": curve_figure,
        "competing": incidence_figure,
        "parametric": parametric_figure,
    }
    figures = {}
    if prepared is not None and len(prepared.frame):
        for name, draw in drawers.items():
            if usable(results.get(name)):
                figure = computed(draw, prepared, settings)
                if not is_not_computed(figure):
                    figures[name] = figure
        cox_section = results.get("cox")
        if usable(cox_section) and usable(cox_section.get("ph_check")):
            found = computed(residual_figure, prepared, settings, source)
            if found is not None and not is_not_computed(found):
                figures["residuals_term"], figures["residuals"] = found
    cox_confidence = {**ANALYSIS_DEFAULTS["cox"], **(settings.get("cox") or {})}["confidence"]
    cox = results.get("cox")
    forest = forest_figure(cox, cox_confidence) if usable(cox) else None
    if forest is not None:
        figures["forest"] = forest
    competing = results.get("competing")
    fine_gray_section = competing.get("fine_gray") if usable(competing) else None
    fine_gray = (
        forest_figure(
            fine_gray_section, cox_confidence, x_title="Subdistribution hazard ratio (log scale)"
        )
        if usable(fine_gray_section)
        else None
    )
    if fine_gray is not None:
        figures["fine_gray_forest"] = fine_gray
    performance = results.get("performance")
    calibration = calibration_figure(performance) if usable(performance) else None
    if calibration is not None:
        figures["calibration"] = calibration
    return figures


# --- the report --------------------------------------------------------------------------------


def report_from_json_and_results(
    results: Mapping,
    settings: Mapping,
    *,
    imported: ImportedTable | None = None,
    prepared: PreparedData | None = None,
    filtered: FilterOutcome | None = None,
    warnings: Sequence[str] = (),
    title: str | None = None,
    source: pd.DataFrame | None = None,
    roles: Roles | None = None,
    fingerprint: DataFingerprint | None = None,
    figures: Mapping | None = None,
) -> str:
    """The HTML report of ``results`` (the JSON object ``run_analysis`` returns).

    ``prepared`` draws the Kaplan–Meier figure; ``imported`` gives the file's fingerprint and
    name; ``filtered`` the rows each recipe filter removed; ``warnings`` extra warnings such as
    a replayed recipe's fingerprint differences. Rows aggregated where they are give
    ``roles``, the source's ``fingerprint`` and the ``figures`` drawn from their counts instead.
    """
    from app.report import build_report

    if source is None:  # the frame prepare was given (a cut or strata column is read from it)
        kept = filtered.frame if filtered is not None else None
        source = kept if kept is not None else getattr(imported, "frame", None)
    if imported is not None:
        fingerprint = DataFingerprint.of(imported)
    if roles is None and prepared is not None:
        roles = prepared.roles
    name = fingerprint.file_name if fingerprint is not None else None
    drawn = {**report_figures(prepared, results, settings, source), **(figures or {})}
    return build_report(
        results,
        settings,
        roles=roles.to_dict() if roles is not None else None,
        title=title or f"Survival analysis of {name or 'data'}",
        figures=drawn,
        fingerprint=fingerprint.to_dict() if fingerprint is not None else None,
        filters=filtered.to_dict()["excluded"] if filtered is not None else (),
        warnings=warnings,
        software=software_versions(),
        column_labels=imported.column_labels if imported is not None else None,
    )


def write_bytes(path: str | Path, content: bytes) -> None:
    """Write a binary file (a Word or Excel report), or an OutputError (exit 2)."""
    try:
        Path(path).write_bytes(content)
    except OSError as exc:
        raise OutputError(f"cannot write {path}: {exc.strerror or exc}") from None


def write_text(path: str | Path, text: str) -> None:
    """Write a report or recipe, or an OutputError (exit 2 on the command line)."""
    try:
        Path(path).write_text(text, encoding="utf-8")
    except OSError as exc:
        raise OutputError(f"cannot write {path}: {exc.strerror or exc}") from None
