"""Every Altair chart Hazel draws.

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


def _colour(field: str, colours: dict[str, str], levels: Sequence[str], title: str | None):
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
    spec["config"] = house_config(style)
    # Width and height are the plot's own; axes, legend and title add to them (the page would
    # otherwise squeeze the whole figure, labels included, into the plot's size).
    spec["autosize"] = {"type": "pad"}
    return spec


def _title(style: ChartStyle) -> alt.TitleParams | str:
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
    colour = _colour("group", colours, levels, legend_title if len(levels) > 1 else None)
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
        width=style.width, height=style.height, title=_title(style)
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
            color=_colour("group", colours, levels, None),
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
        .properties(title=_title(style))
    )


# ---------------------------------------------------------------------------------------------
# Regression


def forest_chart(rows: pd.DataFrame, style: ChartStyle) -> alt.LayerChart:
    """Hazard ratios with intervals on a log axis, one row per term, reference rows marked.

    ``rows`` has columns label, hazard_ratio, lower, upper, is_reference and p_text (and n,
    events for the tooltips, when known), in the order to draw from top to bottom.
    """
    data = rows.copy()
    data["label"] = data["label"].astype(str)
    order = list(data["label"])
    finite = data.loc[~data["is_reference"], ["lower", "upper", "hazard_ratio"]]
    finite = finite.stack()
    finite = finite[(finite > 0) & finite.map(math.isfinite)]
    lo = min(float(finite.min()) if len(finite) else 1.0, 1.0) / 1.25
    hi = max(float(finite.max()) if len(finite) else 1.0, 1.0) * 1.25
    x_scale = alt.Scale(type="log", domain=[lo, hi], nice=False)
    y = alt.Y("label:N", sort=order, title=None, axis=alt.Axis(labelLimit=260, domain=False))
    base = alt.Chart(data).encode(y=y)
    terms = base.transform_filter("!datum.is_reference")
    tooltip = [
        alt.Tooltip("label:N", title="Term"),
        alt.Tooltip("hazard_ratio:Q", title="Hazard ratio", format=".3f"),
        alt.Tooltip("lower:Q", title="Interval from", format=".3f"),
        alt.Tooltip("upper:Q", title="Interval to", format=".3f"),
        alt.Tooltip("p_text:N", title="p"),
    ]
    tooltip += [
        alt.Tooltip(f"{column}:Q", title=title, format=",")
        for column, title in (("n", "Rows"), ("events", "Events"))
        if column in data.columns
    ]
    one = alt.Chart(pd.DataFrame({"x": [1.0]})).mark_rule(color="#7A8585", strokeDash=[4, 3])
    height = max(len(order) * (style.font_size + 14), 80)
    return alt.layer(
        one.encode(x=alt.X("x:Q", scale=x_scale)),
        terms.mark_rule(color=ACCENT, strokeWidth=style.line_width).encode(
            x=alt.X("lower:Q", scale=x_scale, title=style.x_title or "Hazard ratio (log scale)"),
            x2="upper:Q",
            tooltip=tooltip,
        ),
        terms.mark_point(
            filled=True, shape="diamond", color=ACCENT, size=style.point_size * 3, opacity=1
        ).encode(x=alt.X("hazard_ratio:Q", scale=x_scale), tooltip=tooltip),
        base.transform_filter("datum.is_reference")
        .mark_point(shape="circle", color="#7A8585", size=style.point_size * 2, filled=False)
        .encode(x=alt.value(0), tooltip=[alt.Tooltip("label:N", title="Reference level")])
        .encode(x=alt.X("hazard_ratio:Q", scale=x_scale)),
    ).properties(width=style.width, height=height, title=_title(style))


def residual_chart(
    points: pd.DataFrame,
    style: ChartStyle,
    *,
    x_title: str,
    y_title: str,
    x_log: bool = False,
    zero_line: float | None = 0.0,
) -> alt.LayerChart:
    """Residuals (columns x, residual) as dots with a loess smoother drawn by Vega."""
    x_scale = alt.Scale(type="log") if x_log else alt.Scale(zero=False)
    x = alt.X("x:Q", title=style.x_title or x_title, scale=x_scale)
    y = alt.Y("residual:Q", title=style.y_title or y_title)
    base = alt.Chart(points).encode(x=x)
    layers = [
        base.mark_circle(size=style.point_size * 0.6, opacity=0.35, color="#5F6B6B").encode(
            y=y,
            tooltip=[
                alt.Tooltip("x:Q", title=x_title, format=",.4~g"),
                alt.Tooltip("residual:Q", title=y_title, format=".3f"),
            ],
        ),
        base.transform_loess("x", "residual", bandwidth=0.5)
        .mark_line(color=PALETTE[1], strokeWidth=style.line_width)
        .encode(y="residual:Q"),
    ]
    if zero_line is not None:
        layers.insert(
            0,
            alt.Chart(pd.DataFrame({"y": [zero_line]}))
            .mark_rule(color="#7A8585", strokeDash=[4, 3])
            .encode(y="y:Q"),
        )
    return alt.layer(*layers).properties(
        width=style.width, height=int(style.height * 0.8), title=_title(style)
    )


def log_minus_log_chart(
    lines: pd.DataFrame, style: ChartStyle, colours: dict[str, str], *, legend_title: str
) -> alt.Chart:
    """log(−log S) against log time per level (columns group, log_time, value): parallel lines
    are what proportional hazards predicts."""
    data = lines.assign(group=lines["group"].astype(str))
    levels = list(dict.fromkeys(data["group"]))
    return (
        alt.Chart(data)
        .mark_line(interpolate="step-after", strokeWidth=style.line_width)
        .encode(
            x=alt.X("log_time:Q", title=style.x_title or "log(time)", scale=alt.Scale(zero=False)),
            y=alt.Y(
                "value:Q", title=style.y_title or "log(−log survival)", scale=alt.Scale(zero=False)
            ),
            color=_colour("group", colours, levels, legend_title),
            tooltip=[
                alt.Tooltip("group:N", title=legend_title),
                alt.Tooltip("log_time:Q", title="log(time)", format=".3f"),
                alt.Tooltip("value:Q", title="log(−log S)", format=".3f"),
            ],
        )
        .properties(width=style.width, height=int(style.height * 0.8), title=_title(style))
    )


# ---------------------------------------------------------------------------------------------
# Beyond the basics: competing risks, parametric models, sample size and power
# (appended block; builders reuse the step-curve builder where they can)

EXTRAPOLATION_SHADE = "#F3EEE4"


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
            color=_colour("group", colours, levels, None),
            tooltip=[
                alt.Tooltip("group:N", title="Series"),
                alt.Tooltip("time:Q", title="Time", format=",.4~g"),
                alt.Tooltip("estimate:Q", title="1 − Kaplan–Meier", format=".3f"),
            ],
        )
    )
    return alt.layer(curves, km).properties(
        width=style.width, height=style.height, title=_title(style)
    )


def parametric_chart(
    km: pd.DataFrame,
    fitted: pd.DataFrame,
    style: ChartStyle,
    *,
    max_time: float,
    x_max: float,
) -> alt.LayerChart:
    """Fitted survival of each model over the Kaplan–Meier steps (dark grey). Past ``max_time``
    (the last observed time) the fitted lines are dashed over a shaded band labelled as
    extrapolation: they rest on the model's shape, not on data.

    ``km`` has time, estimate; ``fitted`` has distribution, time, survival, extrapolated.
    """
    names = list(dict.fromkeys(fitted["distribution"].astype(str)))
    colours = {name: PALETTE[i % len(PALETTE)] for i, name in enumerate(names)}
    x = alt.X(
        "time:Q",
        title=style.x_title or "Time",
        scale=alt.Scale(domain=[0, x_max], nice=False, zero=True),
    )
    y_scale = alt.Scale(domain=[0, 1], nice=False)
    colour = _colour("distribution", colours, names, "Model")
    data = fitted.assign(distribution=fitted["distribution"].astype(str))
    inside = data.loc[~data["extrapolated"]]
    # the dashed part starts at the last point inside follow-up, so the line does not break
    last_inside = inside.groupby("distribution", sort=False).tail(1)
    beyond = pd.concat([last_inside, data.loc[data["extrapolated"]]], ignore_index=True)
    tooltip = [
        alt.Tooltip("distribution:N", title="Model"),
        alt.Tooltip("time:Q", title="Time", format=",.4~g"),
        alt.Tooltip("survival:Q", title="Fitted survival", format=".3f"),
    ]
    layers = []
    if x_max > max_time:
        shade = pd.DataFrame({"start": [max_time], "end": [x_max], "label": ["extrapolation"]})
        layers.append(
            alt.Chart(shade).mark_rect(color=EXTRAPOLATION_SHADE).encode(x="start:Q", x2="end:Q")
        )
        layers.append(
            alt.Chart(shade)
            .mark_text(align="left", dx=6, dy=12, color="#7A6A4F", fontSize=style.font_size)
            .encode(x="start:Q", y=alt.value(0), text="label:N")
        )
    layers.append(
        alt.Chart(km)
        .mark_line(interpolate="step-after", color=INK, strokeWidth=style.line_width * 0.75)
        .encode(
            x=x,
            y=alt.Y("estimate:Q", title=style.y_title or "Survival probability", scale=y_scale),
            tooltip=[
                alt.Tooltip("time:Q", title="Time", format=",.4~g"),
                alt.Tooltip("estimate:Q", title="Kaplan–Meier", format=".3f"),
            ],
        )
    )
    layers.append(
        alt.Chart(inside)
        .mark_line(strokeWidth=style.line_width, clip=True)
        .encode(x=x, y=alt.Y("survival:Q", scale=y_scale), color=colour, tooltip=tooltip)
    )
    if not data["extrapolated"].any():
        return alt.layer(*layers).properties(
            width=style.width, height=style.height, title=_title(style)
        )
    layers.append(
        alt.Chart(beyond)
        .mark_line(strokeWidth=style.line_width, strokeDash=[6, 4], clip=True)
        .encode(x=x, y=alt.Y("survival:Q", scale=y_scale), color=colour, tooltip=tooltip)
    )
    return alt.layer(*layers).properties(
        width=style.width, height=style.height, title=_title(style)
    )


def power_chart(
    curve: pd.DataFrame, style: ChartStyle, *, target_hr: float | None, target_power: float
) -> alt.LayerChart:
    """Power against the hazard ratio (columns method, hazard_ratio, power), one line per
    formula, with the target power as a dashed rule and the target hazard ratio marked."""
    names = list(dict.fromkeys(curve["method"].astype(str)))
    colours = {name: PALETTE[i % len(PALETTE)] for i, name in enumerate(names)}
    data = curve.assign(method=curve["method"].astype(str))
    # a line per side of HR = 1 (power is not defined at 1), so the line does not bridge it
    data = data.assign(side=(data["hazard_ratio"] > 1).map({True: "above", False: "below"}))
    x = alt.X(
        "hazard_ratio:Q",
        title=style.x_title or "Hazard ratio to detect",
        scale=alt.Scale(type="log", nice=False),
        axis=alt.Axis(values=[0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0, 1.25, 1.5, 2.0, 2.5]),
    )
    y = alt.Y("power:Q", title=style.y_title or "Power", scale=alt.Scale(domain=[0, 1]))
    layers = [
        alt.Chart(data)
        .mark_line(strokeWidth=style.line_width)
        .encode(
            x=x,
            y=y,
            color=_colour("method", colours, names, "Formula"),
            detail="side:N",
            tooltip=[
                alt.Tooltip("method:N", title="Formula"),
                alt.Tooltip("hazard_ratio:Q", title="Hazard ratio", format=".2f"),
                alt.Tooltip("power:Q", title="Power", format=".3f"),
            ],
        ),
        alt.Chart(pd.DataFrame({"power": [target_power]}))
        .mark_rule(color="#7A8585", strokeDash=[4, 3])
        .encode(y="power:Q"),
    ]
    if target_hr is not None:
        layers.append(
            alt.Chart(pd.DataFrame({"hazard_ratio": [target_hr]}))
            .mark_rule(color=ACCENT, strokeDash=[2, 2])
            .encode(x=alt.X("hazard_ratio:Q", scale=alt.Scale(type="log", nice=False)))
        )
    return alt.layer(*layers).properties(
        width=style.width, height=int(style.height * 0.8), title=_title(style)
    )
