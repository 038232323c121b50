"""Hazel's chart style and its curve charts: survival and cumulative-incidence steps, numbers at
risk, and ``finish`` (the house configuration applied to any chart). Charts of models and their
checks (forest, residuals, log(−log), parametric fits, power) are in ``app.charts_models``.

Builders take tidy frames already computed by the engine (and thinned for drawing) plus a
``ChartStyle``, and return Altair charts; they never compute statistics. Smoothers drawn through
residuals use Vega's own loess (``transform_loess``): a drawing aid, computed in the browser.
Tests read the charts as data through ``chart.to_dict()``.
"""

from __future__ import annotations

import hashlib
import itertools
import math
import sys
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
            orient="right",
            direction="vertical",
            symbolType="stroke",
            symbolOpacity=1,
            labelLimit=240,
        )
        if title is not None
        else None,
        sort=domain,
    )


def group_title(column: object) -> str:
    """The words naming what the curves are split by: 'Group: arm'."""
    return f"Group: {column}"


def incidence_legend_title(group_column: object | None) -> str:
    """The legend heading of cumulative-incidence curves: 'Cause', or 'housing: cause' when
    each curve is one level of the group column and one cause (labelled 'straw yard: died')."""
    return "Cause" if group_column is None else f"{group_column}: cause"


def tick_format(ticks: Sequence[float]) -> str:
    """A d3 number format with as many decimals as the tick step needs (a step of 2.5 gives
    '2.5, 5.0, 7.5', never '3, 5, 8'), thousands separated."""
    values = [float(t) for t in ticks]
    steps = [b - a for a, b in itertools.pairwise(values) if b > a]
    reference = [*steps, *values] if steps else values
    decimals = 0
    for value in reference:
        text = f"{abs(value):.10f}".rstrip("0")
        decimals = max(decimals, len(text.split(".")[1]) if "." in text else 0)
    return f",.{min(decimals, 6)}f"


def nice_ticks(upper: float, count: int = 10) -> list[float]:
    """Round tick positions from 0 to ``upper`` (1, 2, 2.5 or 5 times a power of ten apart).

    Both the curve and the numbers-at-risk table use these, so their columns line up; label
    them with ``tick_format``.
    """
    if not upper > 0 or not math.isfinite(upper):
        return [0.0]
    raw = upper / max(count - 1, 1)
    if raw < sys.float_info.min:  # subnormal times (5e-324): no finer step is representable
        return [0.0, float(upper)]
    power = 10 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 2.5, 5, 10) if m * power >= raw)
    n = math.floor(upper / step + 1e-9)
    # 12 significant figures, not 10 decimals: times of 1e-310 keep distinct ticks
    return [float(f"{i * step:.12g}") for i in range(n + 1)]


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


FIGURE_TEXT_LIMIT = 80  # characters of a label a figure shows; the tables keep it whole


def figure_text(text: str) -> str:
    """A label as a figure shows it: controls as codes, and past ``FIGURE_TEXT_LIMIT``
    characters cut, with a short fingerprint of the whole label so that two long labels that
    begin alike stay two (laying out a label costs the renderer time that grows faster than
    its length: a 10,000-character group label took 37 s to draw)."""
    # a line break or a backslash inside a tooltip title breaks the renderer's expression
    # parser (it quotes the title without escaping backslashes): backslashes are shown as the
    # look-alike U+29F5
    text = visible_text(text).replace("\r\n", " ").replace("\n", " ").replace("\r", " ")
    text = text.replace("\\", "\u29f5")
    if len(text) <= FIGURE_TEXT_LIMIT:
        return text
    digest = hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()[:6]
    return f"{text[: FIGURE_TEXT_LIMIT - 10]}… #{digest}"


def visible_spec(value):
    """The spec with direction controls and control characters in any label (titles, legend
    entries, the data's text columns) shown as codes (``engine.text_safety``) and long labels
    cut (``figure_text``): a U+202E would reverse a legend, and an ESC makes the SVG renderer of
    the exports abort."""
    if isinstance(value, str):
        return figure_text(value)
    if isinstance(value, dict):
        return {key: visible_spec(item) for key, item in value.items()}
    if isinstance(value, list):
        return [visible_spec(item) for item in value]
    if isinstance(value, pd.DataFrame):
        return _figure_frame(visible_frame(value))
    return value


def _figure_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """``figure_text`` on the cells of a drawing frame's text columns that it changes (long,
    or with a line break or backslash), so that legend domains in the spec still match them."""
    changed = {}
    for column in frame.columns:
        series = frame[column]
        if pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series):
            continue
        text = series.astype("string")
        if text.str.len().gt(FIGURE_TEXT_LIMIT).any() or text.str.contains(r"[\\\r\n]").any():
            changed[column] = series.map(
                lambda v: figure_text(v) if isinstance(v, str) else v, na_action="ignore"
            )
    if not changed:
        return frame
    out = frame.copy()
    for column, values in changed.items():
        out[column] = values
    return out


def chart_title(style: ChartStyle) -> alt.TitleParams | str:
    """The style's title, or none (an empty string, which Vega-Lite leaves out)."""
    return alt.TitleParams(style.title) if style.title else ""


# ---------------------------------------------------------------------------------------------
# Step curves (survival, cumulative incidence, cumulative hazard, predicted curves)


def axis_extent(style: ChartStyle) -> int:
    """Left-axis width shared by a curve and its at-risk table, so the two line up."""
    return style.font_size * 10


CENSOR_SHAPE = "M0,0L0,-1"  # a short pole standing on the curve (Vega symbol path, [-1, 1] box)
LABEL_GAP_PX = 6  # between a curve's end and its label


def _text_width(text: str, font_size: int) -> float:
    return 0.6 * font_size * len(text)


def end_labels(
    curves: pd.DataFrame,
    style: ChartStyle,
    x_domain: tuple[float, float],
    y_domain: tuple[float, float],
) -> pd.DataFrame | None:
    """Where each curve's name goes: just right of its last drawn point, nudged apart
    vertically by up to two lines. None when the names would still collide (or leave the
    plot): the chart then uses a legend instead.

    ``curves`` has group, time, estimate; the result has group, time, estimate (the label's
    anchor, in data units) and y_px (its nudged vertical position in pixels from the top).
    """
    x0, x1 = x_domain
    y0, y1 = y_domain
    if not x1 > x0 or not y1 > y0:
        return None
    rows = []
    for group, part in curves.groupby("group", sort=False):
        inside = part.loc[part["time"] <= x1]
        if inside.empty:
            continue
        last = inside.iloc[-1]
        estimate = float(last["estimate"])
        if not math.isfinite(estimate):
            continue
        rows.append(
            {
                "group": str(group),
                "time": float(min(last["time"], x1)) if len(inside) == len(part) else x1,
                "estimate": estimate,
                "y_px": (1 - (min(max(estimate, y0), y1) - y0) / (y1 - y0)) * style.height,
            }
        )
    if not rows:
        return None
    labels = pd.DataFrame(rows).sort_values("y_px", kind="stable").reset_index(drop=True)
    line = style.font_size * 1.25
    wanted = labels["y_px"].to_numpy(dtype=float)
    placed = wanted.copy()
    x_px = (labels["time"].to_numpy(dtype=float) - x0) / (x1 - x0) * style.width
    widths = [_text_width(g, style.font_size) for g in labels["group"]]
    for _ in range(50):  # push overlapping neighbours apart, then pull back inside the plot
        moved = False
        for i in range(1, len(placed)):
            overlap_x = abs(x_px[i] - x_px[i - 1]) < max(widths[i], widths[i - 1]) + LABEL_GAP_PX
            gap = placed[i] - placed[i - 1]
            if overlap_x and gap < line:
                shift = (line - gap) / 2
                placed[i - 1] -= shift
                placed[i] += shift
                moved = True
        placed = placed.clip(line / 2, style.height - line / 2)
        if not moved:
            break
    for i in range(1, len(placed)):
        overlap_x = abs(x_px[i] - x_px[i - 1]) < max(widths[i], widths[i - 1]) + LABEL_GAP_PX
        if overlap_x and placed[i] - placed[i - 1] < line * 0.95:
            return None
    if (abs(placed - wanted) > 2 * line).any():
        return None
    return labels.assign(y_px=placed)


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
    label_ends: bool = True,
) -> alt.LayerChart:
    """Step lines (one per ``group``) with an optional interval band and censoring marks.

    Hazel's look: each curve is named at its right-hand end in its own colour, with
    ``legend_title`` (for example "Group: arm") above those names; a legend on the right
    replaces them only where the names would collide (``end_labels``). The interval is a very
    light fill edged by thin dotted lines; a censored time is a short pole standing on the
    curve. Ticks are labelled with as many decimals as their step needs (``tick_format``).

    ``curves`` has columns group, time, estimate and, when known, lower, upper, at_risk (one
    row per kept step vertex); ``censored`` has group, time, estimate. Tooltips show time,
    estimate, interval and number at risk at each vertex. ``align_with_table`` fixes the width
    of the left axis to the one of ``at_risk_chart`` so the two line up when stacked.
    """
    levels = list(dict.fromkeys(curves["group"].astype(str)))
    data = curves.assign(group=curves["group"].astype(str))
    x_upper = x_max if x_max is not None else float(data["time"].max() or 1.0)
    x_axis = alt.Axis(
        values=list(ticks) if ticks is not None else alt.Undefined,
        format=tick_format(ticks) if ticks is not None else alt.Undefined,
        grid=True,
    )
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
    named = legend_title is not None and len(levels) > 1
    labels = end_labels(data, style, (0.0, x_upper), y_domain) if named and label_ends else None
    legend = legend_title if named and labels is None else None
    colour = colour_encoding("group", colours, levels, legend)
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
    if band and {"lower", "upper"} <= set(data.columns):
        layers.append(
            base.mark_area(interpolate="step-after", opacity=0.07, clip=True, tooltip=None).encode(
                y=alt.Y("lower:Q", scale=y_scale), y2="upper:Q"
            )
        )
        for edge in ("lower", "upper"):
            layers.append(
                base.mark_line(
                    interpolate="step-after",
                    strokeWidth=max(style.line_width * 0.4, 0.8),
                    strokeDash=[1, 2],
                    opacity=0.8,
                    clip=True,
                    tooltip=None,  # the hover points carry the tooltip
                ).encode(y=alt.Y(f"{edge}:Q", scale=y_scale))
            )
    layers.append(
        base.mark_line(interpolate="step-after", strokeWidth=style.line_width, clip=True).encode(
            y=alt.Y("estimate:Q", title=style.y_title or "Estimate", scale=y_scale, axis=y_axis)
        )
    )
    # invisible points on every vertex carry the tooltip; drawn last, they sit on top
    hover = base.mark_point(size=style.point_size * 3, opacity=0, clip=True).encode(
        y="estimate:Q", tooltip=tooltip
    )
    if censored is not None and not censored.empty:
        marks = censored.assign(group=censored["group"].astype(str))
        pole = alt.Chart().mark_point(
            shape=CENSOR_SHAPE,
            size=(style.font_size * 1.3) ** 2,
            filled=False,
            strokeWidth=max(style.line_width * 0.7, 1.2),
            opacity=1,
            clip=True,
        )
        layers.append(
            pole.encode(
                x="time:Q",
                y="estimate:Q",
                color=colour,
                tooltip=[
                    alt.Tooltip("group:N", title="Group"),
                    alt.Tooltip("time:Q", title="Censored at", format=",.4~g"),
                ],
            ).properties(data=marks)
        )
    if labels is not None:
        layers.append(
            alt.Chart(labels)
            .mark_text(
                align="left",
                baseline="middle",
                dx=LABEL_GAP_PX,
                fontSize=style.font_size,
                fontWeight="bold",
            )
            .encode(x="time:Q", y=alt.Y("y_px:Q", scale=None), color=colour, text="group:N")
        )
        if legend_title:
            heading = pd.DataFrame({"time": [float(labels["time"].max())], "text": [legend_title]})
            layers.append(
                alt.Chart(heading)
                .mark_text(
                    align="left",
                    baseline="bottom",
                    dx=LABEL_GAP_PX,
                    dy=-6,
                    fontSize=style.font_size,
                    color="#5F6B6B",
                )
                .encode(x="time:Q", y=alt.value(0), text="text:N")
            )
    layers.append(hover)
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
    title: str = "Subjects still at risk",
) -> alt.LayerChart:
    """Numbers at risk (columns group, time, at_risk) as dark text under the curve's own x
    ticks, one row per group, each row named on the left after a short line in the group's
    colour (the key between the table and the curves)."""
    data = table.assign(group=table["group"].astype(str))
    levels = list(dict.fromkeys(data["group"]))
    row_height = style.font_size + 10
    extent = axis_extent(style)
    x = alt.X(
        "time:Q",
        scale=alt.Scale(domain=[0, x_max], nice=False, zero=True),
        axis=alt.Axis(
            values=list(ticks), labels=False, ticks=False, domain=False, grid=False, title=None
        ),
    )
    y = alt.Y(
        "group:N",
        sort=levels,
        title=None,
        axis=alt.Axis(
            labels=False,
            minExtent=extent,
            maxExtent=extent,
            ticks=False,
            domain=False,
        ),
    )
    keys = data.drop_duplicates("group")[["group"]]
    counts = (
        alt.Chart(data)
        .mark_text(fontSize=style.font_size, color=INK)
        .encode(x=x, y=y, text=alt.Text("at_risk:Q", format=","))
    )
    key_line = (
        alt.Chart(keys)
        .mark_rule(strokeWidth=max(style.line_width, 2.0))
        .encode(
            x=alt.value(-extent + 4),
            x2=alt.value(-extent + 4 + style.font_size * 1.4),
            y=y,
            color=colour_encoding("group", colours, levels, None),
        )
    )
    names = (
        alt.Chart(keys)
        .mark_text(align="left", fontSize=style.font_size, color=INK, limit=extent - 30)
        .encode(x=alt.value(-extent + 8 + style.font_size * 1.4), y=y, text="group:N")
    )
    return alt.layer(key_line, names, counts).properties(
        width=style.width,
        height=row_height * max(len(levels), 1),
        title=alt.TitleParams(
            title, fontSize=style.font_size, fontWeight="normal", color="#5F6B6B", anchor="start"
        ),
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
