"""Hazel's chart style and its curve charts: survival and cumulative-incidence steps, numbers at
risk, and ``finish`` (the house configuration applied to any chart). Charts of models and their
checks (forest, residuals, log(−log), parametric fits, power) are in ``app.charts_models``.

Builders take tidy frames already computed by the engine (and thinned for drawing) plus a
``ChartStyle``, and return Altair charts; they never compute statistics. Smoothers drawn through
residuals use Vega's own loess (``transform_loess``): a drawing aid, computed in the browser.
Tests read the charts as data through ``chart.to_dict()``.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Sequence
from dataclasses import dataclass, replace

import altair as alt
import pandas as pd

from engine.text_safety import visible_frame, visible_text

# Thinning bounds what a chart carries (a few thousand vertices per curve); Altair's default
# limit of 5,000 rows per chart would refuse several thinned curves drawn together.
alt.data_transformers.disable_max_rows()

# Okabe & Ito (2008), "Color Universal Design", in an order of our own: the first colours are
# the most distinct from each other on white and for the common colour-vision deficiencies.
PALETTE = (
    "#0072B2",  # blue
    "#D55E00",  # vermillion
    "#009E73",  # bluish green
    "#CC79A7",  # reddish purple
    "#E69F00",  # orange
    "#56B4E9",  # sky blue
    "#000000",  # black
    "#F0E442",  # yellow: weak on white, so last
)
ALL_ROWS_COLOUR = "#4A4A4A"
ALL_ROWS_LABEL = "All rows"
FONT = "Helvetica, Arial, sans-serif"
INK = "#1F2A2E"
ACCENT = "#0B6E69"


@dataclass(frozen=True)
class ChartStyle:
    """Size, type and line weight; ``presentation()`` gives the projector version."""

    width: int = 640
    height: int = 360
    font_size: int = 12
    title_size: int = 15
    line_width: float = 2.0
    point_size: int = 30
    title: str = ""
    x_title: str = ""
    y_title: str = ""

    @classmethod
    def presentation(cls) -> ChartStyle:
        return cls(
            width=960, height=480, font_size=18, title_size=24, line_width=4.0, point_size=80
        )

    def titled(self, title: str = "", x_title: str = "", y_title: str = "") -> ChartStyle:
        return replace(self, title=title, x_title=x_title, y_title=y_title)


def group_colours(levels: Sequence[object]) -> dict[str, str]:
    """One colour per group level, by position, so a group keeps its colour on every page."""
    colours = {ALL_ROWS_LABEL: ALL_ROWS_COLOUR}
    for i, level in enumerate(levels):
        colours[str(level)] = PALETTE[i % len(PALETTE)]
    return colours


def colour_encoding(field: str, colours: dict[str, str], levels: Sequence[str], title: str | None):
    """A colour channel that keeps each level's colour whatever subset of levels is drawn."""
    domain = [str(level) for level in levels]
    return alt.Color(
        f"{field}:N",
        scale=alt.Scale(domain=domain, range=[colours.get(d, ALL_ROWS_COLOUR) for d in domain]),
        legend=alt.Legend(
            title=title,
            orient="top",
            direction="horizontal",
            columns=min(max(len(domain), 1), 4),
            symbolType="stroke",
            symbolOpacity=1,
            labelLimit=240,
        )
        if title is not None
        else None,
        sort=domain,
    )


def nice_ticks(upper: float, count: int = 10) -> list[float]:
    """Round tick positions from 0 to ``upper`` (1, 2 or 5 times a power of ten apart).

    Both the curve and the numbers-at-risk table use these, so their columns line up.
    """
    if not upper > 0 or not math.isfinite(upper):
        return [0.0]
    raw = upper / max(count - 1, 1)
    power = 10 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 2.5, 5, 10) if m * power >= raw)
    n = math.floor(upper / step + 1e-9)
    return [round(i * step, 10) for i in range(n + 1)]


def house_config(style: ChartStyle) -> dict:
    """House look as a Vega-Lite config: type sizes, colours and a quiet frame."""
    return {
        "font": FONT,
        "view": {"stroke": None},
        "axis": {
            "labelFontSize": style.font_size,
            "titleFontSize": style.font_size + 1,
            "labelColor": INK,
            "titleColor": INK,
            "titleFontWeight": "normal",
            "gridColor": "#E3E8E8",
            "domainColor": "#9AA5A5",
            "tickColor": "#9AA5A5",
        },
        "legend": {
            "labelFontSize": style.font_size,
            "titleFontSize": style.font_size,
            "titleFontWeight": "normal",
            "symbolStrokeWidth": style.line_width,
        },
        "title": {
            "fontSize": style.title_size,
            "anchor": "start",
            "color": INK,
            "fontWeight": "bold",
            "offset": 10,
        },
    }


_DATA_LOCK = threading.Lock()  # Altair's data transformers are process-wide settings


def _collect_frames(data, frames: dict) -> dict:
    """Altair data transformer: keep each DataFrame aside and refer to it by name."""
    name = f"data-{len(frames)}"
    frames[name] = data
    return {"name": name}


alt.data_transformers.register("hazel_frames", _collect_frames)


def finish(chart: alt.TopLevelMixin, style: ChartStyle) -> dict:
    """The Vega-Lite spec to draw, with the house look and its data as DataFrames.

    Built as a plain dictionary, data left as DataFrames under ``datasets`` (Streamlit sends
    those as Arrow): Altair's validation, copying and row-by-row conversion of a finished chart
    take longer than a display switch may. Tests validate every builder's output instead, and
    ``exports.json_spec`` turns the frames into JSON rows for the image exports.
    """
    frames: dict = {}
    with _DATA_LOCK, alt.data_transformers.enable("hazel_frames", frames=frames):
        spec = chart.to_dict(validate=False)
    spec["datasets"] = {**spec.get("datasets", {}), **frames}
    spec = visible_spec(spec)
    spec["config"] = house_config(style)
    # Width and height are the plot's own; axes, legend and title add to them (the page would
    # otherwise squeeze the whole figure, labels included, into the plot's size).
    spec["autosize"] = {"type": "pad"}
    return spec


def visible_spec(value):
    """The spec with direction controls and control characters in any label (titles, legend
    entries, the data's text columns) shown as codes (``engine.text_safety``): a U+202E would
    reverse a legend, and an ESC makes the SVG renderer of the exports abort."""
    if isinstance(value, str):
        return visible_text(value)
    if isinstance(value, dict):
        return {key: visible_spec(item) for key, item in value.items()}
    if isinstance(value, list):
        return [visible_spec(item) for item in value]
    if isinstance(value, pd.DataFrame):
        return visible_frame(value)
    return value


def chart_title(style: ChartStyle) -> alt.TitleParams | str:
    """The style's title, or none (an empty string, which Vega-Lite leaves out)."""
    return alt.TitleParams(style.title) if style.title else ""


# ---------------------------------------------------------------------------------------------
# Step curves (survival, cumulative incidence, cumulative hazard, predicted curves)


def axis_extent(style: ChartStyle) -> int:
    """Left-axis width shared by a curve and its at-risk table, so the two line up."""
    return style.font_size * 10


def step_curve_chart(
    curves: pd.DataFrame,
    style: ChartStyle,
    colours: dict[str, str],
    *,
    censored: pd.DataFrame | None = None,
    band: bool = True,
    y_domain: tuple[float, float] = (0.0, 1.0),
    x_max: float | None = None,
    ticks: Sequence[float] | None = None,
    y_format: str = ".2f",
    legend_title: str | None = "",
    align_with_table: bool = False,
) -> alt.LayerChart:
    """Step lines (one per ``group``) with an optional interval band and censoring marks.

    ``curves`` has columns group, time, estimate and, when known, lower, upper, at_risk (one
    row per kept step vertex); ``censored`` has group, time, estimate. Tooltips show time,
    estimate, interval and number at risk at each vertex. ``align_with_table`` fixes the width
    of the left axis to the one of ``at_risk_chart`` so the two line up when stacked.
    """
    levels = list(dict.fromkeys(curves["group"].astype(str)))
    data = curves.assign(group=curves["group"].astype(str))
    x_upper = x_max if x_max is not None else float(data["time"].max() or 1.0)
    x_axis = alt.Axis(values=list(ticks) if ticks is not None else alt.Undefined, grid=True)
    x = alt.X(
        "time:Q",
        title=style.x_title or "Time",
        scale=alt.Scale(domain=[0, x_upper], nice=False, zero=True),
        axis=x_axis,
    )
    y_scale = alt.Scale(domain=list(y_domain), nice=False)
    y_axis = (
        alt.Axis(minExtent=axis_extent(style), maxExtent=axis_extent(style), format=y_format)
        if align_with_table
        else alt.Axis(format=y_format)
    )
    colour = colour_encoding("group", colours, levels, legend_title if len(levels) > 1 else None)
    tooltip = [
        alt.Tooltip(f"{field}:{kind}", title=title, format=fmt)
        for field, kind, title, fmt in (
            ("group", "N", "Group", alt.Undefined),
            ("time", "Q", "Time", ",.4~g"),
            ("estimate", "Q", "Estimate", ".3f"),
            ("lower", "Q", "Interval from", ".3f"),
            ("upper", "Q", "Interval to", ".3f"),
            ("at_risk", "Q", "At risk", ","),
        )
        if field in data.columns
    ]
    # Layers carry no data of their own (the layer holds it once): Altair copies a chart's data
    # on every method call, which for thousands of vertices costs more than drawing them.
    base = alt.Chart().encode(x=x, color=colour)
    layers = []
    if band:
        layers.append(
            base.mark_area(interpolate="step-after", opacity=0.16, clip=True).encode(
                y=alt.Y("lower:Q", scale=y_scale), y2="upper:Q"
            )
        )
    layers.append(
        base.mark_line(interpolate="step-after", strokeWidth=style.line_width, clip=True).encode(
            y=alt.Y("estimate:Q", title=style.y_title or "Estimate", scale=y_scale, axis=y_axis)
        )
    )
    layers.append(
        base.mark_point(size=style.point_size * 3, opacity=0, clip=True).encode(
            y="estimate:Q", tooltip=tooltip
        )
    )
    if censored is not None and not censored.empty:
        marks = censored.assign(group=censored["group"].astype(str))
        tick = alt.Chart().mark_tick(
            orient="vertical", size=style.font_size * 0.7, thickness=1.4, clip=True
        )
        layers.append(
            tick.encode(
                x="time:Q",
                y="estimate:Q",
                color=colour,
                tooltip=[
                    alt.Tooltip("group:N", title="Group"),
                    alt.Tooltip("time:Q", title="Censored at", format=",.4~g"),
                ],
            ).properties(data=marks)
        )
    return alt.layer(*layers, data=data).properties(
        width=style.width, height=style.height, title=chart_title(style)
    )


def at_risk_chart(
    table: pd.DataFrame,
    style: ChartStyle,
    colours: dict[str, str],
    *,
    x_max: float,
    ticks: Sequence[float],
    title: str = "Number at risk",
) -> alt.Chart:
    """Numbers at risk (columns group, time, at_risk) as text under the curve's own x ticks."""
    data = table.assign(group=table["group"].astype(str))
    levels = list(dict.fromkeys(data["group"]))
    row_height = style.font_size + 10
    return (
        alt.Chart(data)
        .mark_text(fontSize=style.font_size, fontWeight="bold")
        .encode(
            x=alt.X(
                "time:Q",
                scale=alt.Scale(domain=[0, x_max], nice=False, zero=True),
                axis=alt.Axis(
                    values=list(ticks),
                    labels=False,
                    ticks=False,
                    domain=False,
                    grid=False,
                    title=None,
                ),
            ),
            y=alt.Y(
                "group:N",
                sort=levels,
                title=None,
                axis=alt.Axis(
                    minExtent=axis_extent(style),
                    maxExtent=axis_extent(style),
                    labelLimit=axis_extent(style) - 24,
                    labelPadding=24,
                    ticks=False,
                    domain=False,
                ),
            ),
            text=alt.Text("at_risk:Q", format=","),
            color=colour_encoding("group", colours, levels, None),
        )
        .properties(
            width=style.width,
            height=row_height * max(len(levels), 1),
            title=alt.TitleParams(title, fontSize=style.font_size + 1, fontWeight="normal"),
        )
    )


def curve_with_risk_table(
    curve: alt.LayerChart, risk: alt.Chart | None, style: ChartStyle
) -> alt.TopLevelMixin:
    """The curve above its numbers-at-risk table, sharing the x axis positions.

    The title moves to the stacked figure so that it sits above the legend, not below it.
    """
    if risk is None:
        return curve
    return (
        alt.vconcat(curve.properties(title=""), risk, spacing=14)
        .resolve_scale(color="shared")
        .properties(title=chart_title(style))
    )


# ---------------------------------------------------------------------------------------------
# Cumulative incidence (competing risks), drawn with the step-curve builder


def incidence_chart(
    incidence: pd.DataFrame,
    style: ChartStyle,
    colours: dict[str, str],
    *,
    one_minus_km: pd.DataFrame | None = None,
    y_domain: tuple[float, float] = (0.0, 1.0),
    legend_title: str = "Cause",
) -> alt.LayerChart:
    """Aalen–Johansen cumulative incidence per series (cause, or group: cause) with bands, and
    optionally 1 − KM per series as thin dotted steps for comparison (it overstates incidence
    when competing events exist). Both frames have columns group, time, estimate (+ bands)."""
    curves = step_curve_chart(
        incidence,
        style,
        colours,
        y_domain=y_domain,
        legend_title=legend_title,
        y_format=".0%",
    )
    if one_minus_km is None or one_minus_km.empty:
        return curves
    levels = list(dict.fromkeys(incidence["group"].astype(str)))
    km = (
        alt.Chart(one_minus_km.assign(group=one_minus_km["group"].astype(str)))
        .mark_line(
            interpolate="step-after",
            strokeDash=[2, 3],
            strokeWidth=max(style.line_width * 0.6, 1.0),
            clip=True,
        )
        .encode(
            x="time:Q",
            y=alt.Y("estimate:Q", scale=alt.Scale(domain=list(y_domain), nice=False)),
            color=colour_encoding("group", colours, levels, None),
            tooltip=[
                alt.Tooltip("group:N", title="Series"),
                alt.Tooltip("time:Q", title="Time", format=",.4~g"),
                alt.Tooltip("estimate:Q", title="1 − Kaplan–Meier", format=".3f"),
            ],
        )
    )
    return alt.layer(curves, km).properties(
        width=style.width, height=style.height, title=chart_title(style)
    )
