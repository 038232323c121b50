"""Altair charts of models and their checks: the Cox forest plot, residual and log(−log) plots
for proportional hazards, fitted parametric curves, and power curves for planning.

The curve, at-risk and cumulative-incidence builders, the house style and ``finish`` are in
``app.charts``; builders here follow the same rules (tidy frames from the engine in, charts out,
no statistics computed).
"""

from __future__ import annotations

import math

import altair as alt
import pandas as pd

from app.charts import ACCENT, INK, PALETTE, ChartStyle, chart_title, colour_encoding
from engine.wording import term_label

EXTRAPOLATION_SHADE = "#F3EEE4"


# ---------------------------------------------------------------------------------------------
# Cox model and proportional-hazards checks


def forest_labels(rows: pd.DataFrame, format_p) -> pd.DataFrame:
    """Labels for ``engine.cox.summaries.forest_data`` rows (variable, level, is_reference, …):
    the Cox table's "variable: level vs reference", the reference row as "variable: level
    (reference)", and the p-values as text (``format_p``)."""
    references = {
        v: lv for v, lv, ref in rows[["variable", "level", "is_reference"]].itertuples(index=False)
        if ref
    }  # fmt: skip
    labels = []
    for variable, level, is_reference in rows[["variable", "level", "is_reference"]].itertuples(
        index=False
    ):
        if level is None or pd.isna(level):
            labels.append(str(variable))
        elif is_reference:
            labels.append(f"{variable}: {level} (reference)")
        else:
            labels.append(term_label(variable, level, references.get(variable)))
    return rows.assign(
        label=labels,
        p_text=[
            "reference" if ref else format_p(p)
            for p, ref in rows[["p_value", "is_reference"]].itertuples(index=False)
        ],
    )


def forest_domain(rows: pd.DataFrame) -> tuple[float, float]:
    """A log-axis domain holding 1 and every estimate and interval limit, with a margin, so no
    interval is cut at the axis end."""
    drawn = rows.loc[~rows["is_reference"].astype(bool), ["lower", "upper", "hazard_ratio"]]
    values = pd.to_numeric(drawn.stack(), errors="coerce")
    values = values[(values > 0) & values.map(math.isfinite)]
    low = min(float(values.min()) if len(values) else 1.0, 1.0)
    high = max(float(values.max()) if len(values) else 1.0, 1.0)
    margin = max(math.log(high / low) * 0.06, math.log(1.15))
    return low / math.exp(margin), high * math.exp(margin)


def forest_chart(rows: pd.DataFrame, style: ChartStyle, confidence: float = 0.95):
    """Hazard ratios as squares with their intervals on a log axis, one row per term, reference
    rows marked with an open circle at 1, and a text column "HR (95% CI)" on the right.

    ``rows`` has columns label, hazard_ratio, lower, upper, is_reference and p_text (and n,
    events for the tooltips, when known), in the order to draw from top to bottom. Squares, not
    diamonds: each row is one model's estimate, not a pooled one.
    """
    from engine.wording import format_confidence, format_interval, format_ratio

    ci = f"{format_confidence(confidence)} CI"
    data = rows.copy()
    data["label"] = data["label"].astype(str)
    data["is_reference"] = data["is_reference"].astype(bool)
    # a coefficient that runs off to infinity has no interval: no square either (its hazard
    # ratio is where the fit stopped, and would stretch the axis), and its text says so
    runaway = ~data["is_reference"] & data["lower"].isna() & data["upper"].isna()
    data["hr_text"] = [
        "1 (reference)"
        if ref
        else "not estimable (runs off to infinity)"
        if off
        else f"{format_ratio(h)} ({format_interval(lo, hi)})"
        for h, lo, hi, ref, off in zip(
            data["hazard_ratio"],
            data["lower"],
            data["upper"],
            data["is_reference"],
            runaway,
            strict=True,
        )
    ]
    data["hazard_ratio"] = data["hazard_ratio"].where(~runaway)
    order = list(data["label"])
    x_scale = alt.Scale(type="log", domain=list(forest_domain(data)), nice=False)
    y = alt.Y("label:N", sort=order, title=None, axis=alt.Axis(labelLimit=260, domain=False))
    base = alt.Chart(data).encode(y=y)
    terms = base.transform_filter("!datum.is_reference")
    tooltip = [
        alt.Tooltip("label:N", title="Term"),
        alt.Tooltip("hazard_ratio:Q", title="Hazard ratio", format=".3f"),
        alt.Tooltip("lower:Q", title=f"{ci} from", format=".3f"),
        alt.Tooltip("upper:Q", title=f"{ci} to", format=".3f"),
        alt.Tooltip("p_text:N", title="p"),
    ]
    tooltip += [
        alt.Tooltip(f"{column}:Q", title=title, format=",")
        for column, title in (("n", "Rows"), ("events", "Events"))
        if column in data.columns
    ]
    one = alt.Chart(pd.DataFrame({"x": [1.0]})).mark_rule(color="#7A8585", strokeDash=[4, 3])
    height = max(len(order) * (style.font_size + 14), 80)
    x_title = style.x_title or f"Hazard ratio with {ci} (log scale)"
    plot = alt.layer(
        one.encode(x=alt.X("x:Q", scale=x_scale)),
        terms.mark_rule(color=ACCENT, strokeWidth=style.line_width).encode(
            x=alt.X("lower:Q", scale=x_scale, title=x_title),
            x2="upper:Q",
            tooltip=tooltip,
        ),
        terms.mark_square(color=ACCENT, size=style.point_size * 3, opacity=1).encode(
            x=alt.X("hazard_ratio:Q", scale=x_scale), tooltip=tooltip
        ),
        base.transform_filter("datum.is_reference")
        .mark_point(shape="circle", color="#7A8585", size=style.point_size * 2, filled=False)
        .encode(
            x=alt.X("hazard_ratio:Q", scale=x_scale),
            tooltip=[alt.Tooltip("label:N", title="Reference level")],
        ),
    ).properties(width=style.width, height=height)
    text = (
        base.mark_text(align="left", fontSize=style.font_size, color=INK)
        .encode(
            x=alt.value(0),
            text="hr_text:N",
            y=alt.Y("label:N", sort=order, axis=None),
        )
        .properties(
            width=style.font_size * 13,
            height=height,
            title=alt.TitleParams(
                f"HR ({ci})", fontSize=style.font_size, fontWeight="normal", anchor="start"
            ),
        )
    )
    return (
        alt.hconcat(plot, text, spacing=12)
        .resolve_scale(y="shared")
        .properties(title=chart_title(style))
    )


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
        width=style.width, height=int(style.height * 0.8), title=chart_title(style)
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
            color=colour_encoding("group", colours, levels, legend_title),
            tooltip=[
                alt.Tooltip("group:N", title=legend_title),
                alt.Tooltip("log_time:Q", title="log(time)", format=".3f"),
                alt.Tooltip("value:Q", title="log(−log S)", format=".3f"),
            ],
        )
        .properties(width=style.width, height=int(style.height * 0.8), title=chart_title(style))
    )


# ---------------------------------------------------------------------------------------------
# Parametric fits and power


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
    colour = colour_encoding("distribution", colours, names, "Model")
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
            width=style.width, height=style.height, title=chart_title(style)
        )
    layers.append(
        alt.Chart(beyond)
        .mark_line(strokeWidth=style.line_width, strokeDash=[6, 4], clip=True)
        .encode(x=x, y=alt.Y("survival:Q", scale=y_scale), color=colour, tooltip=tooltip)
    )
    return alt.layer(*layers).properties(
        width=style.width, height=style.height, title=chart_title(style)
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
        axis=alt.Axis(
            values=[0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0, 1.25, 1.5, 2.0, 2.5], format=".2~f"
        ),
    )
    y = alt.Y("power:Q", title=style.y_title or "Power", scale=alt.Scale(domain=[0, 1]))
    layers = [
        alt.Chart(data)
        .mark_line(strokeWidth=style.line_width)
        .encode(
            x=x,
            y=y,
            color=colour_encoding("method", colours, names, "Formula"),
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
        width=style.width, height=int(style.height * 0.8), title=chart_title(style)
    )


# ---------------------------------------------------------------------------------------------
# Non-linear effects


def spline_chart(
    curve: pd.DataFrame,
    style: ChartStyle,
    *,
    knots=(),
    reference: float | None = None,
    band: bool = True,
    log_scale: bool = True,
) -> alt.LayerChart:
    """The hazard ratio against a covariate (columns x, hazard_ratio, lower, upper) with its
    band, a dashed line at 1 and the knots as short marks along the bottom."""
    data = curve[["x", "hazard_ratio", "lower", "upper"]].copy()
    values = data[["hazard_ratio", "lower", "upper"]] if band else data[["hazard_ratio"]]
    positive = values.stack()
    positive = positive[(positive > 0) & positive.map(math.isfinite)]
    lo = min(float(positive.min()) if len(positive) else 1.0, 1.0)
    hi = max(float(positive.max()) if len(positive) else 1.0, 1.0)
    y_scale = (
        alt.Scale(type="log", domain=[lo / 1.1, hi * 1.1], nice=False)
        if log_scale
        else alt.Scale(domain=[0, hi * 1.05], nice=False)
    )
    x = alt.X("x:Q", title=style.x_title or "Covariate", scale=alt.Scale(zero=False, nice=False))
    y_title = style.y_title or "Hazard ratio" + (" (log scale)" if log_scale else "")
    tooltip = [
        alt.Tooltip("x:Q", title="Value", format=".4g"),
        alt.Tooltip("hazard_ratio:Q", title="Hazard ratio", format=".3f"),
        alt.Tooltip("lower:Q", title="Interval from", format=".3f"),
        alt.Tooltip("upper:Q", title="Interval to", format=".3f"),
    ]
    base = alt.Chart(data).encode(x=x)
    layers = []
    if band:
        layers.append(
            base.mark_area(color=ACCENT, opacity=0.18).encode(
                y=alt.Y("lower:Q", scale=y_scale, title=y_title), y2="upper:Q"
            )
        )
    layers.append(
        base.mark_line(color=ACCENT, strokeWidth=style.line_width).encode(
            y=alt.Y("hazard_ratio:Q", scale=y_scale, title=y_title), tooltip=tooltip
        )
    )
    one = pd.DataFrame({"one": [1.0]})
    layers.append(
        alt.Chart(one).mark_rule(color="#7A8585", strokeDash=[4, 3]).encode(y=alt.Y("one:Q"))
    )
    if reference is not None:
        point = pd.DataFrame({"x": [float(reference)], "hazard_ratio": [1.0]})
        layers.append(
            alt.Chart(point)
            .mark_point(shape="circle", color=INK, filled=True, size=style.point_size * 2)
            .encode(
                x="x:Q",
                y=alt.Y("hazard_ratio:Q", scale=y_scale),
                tooltip=[alt.Tooltip("x:Q", title="Reference value", format=".4g")],
            )
        )
    if len(knots):
        marks = pd.DataFrame({"x": [float(k) for k in knots]})
        layers.append(
            alt.Chart(marks)
            .mark_tick(color=INK, thickness=2, size=style.font_size)
            .encode(
                x="x:Q",
                y=alt.value(style.height - style.font_size / 2),
                tooltip=[alt.Tooltip("x:Q", title="Knot", format=".4g")],
            )
        )
    return alt.layer(*layers).properties(
        width=style.width, height=style.height, title=chart_title(style)
    )


# Prediction performance


def calibration_chart(rows: pd.DataFrame, style: ChartStyle) -> alt.LayerChart:
    """Observed (Kaplan–Meier, with interval) against mean predicted survival per risk group
    (columns risk_group, n, events, predicted, observed, lower, upper), with the line of
    perfect calibration dashed."""
    data = rows.assign(group=rows["risk_group"].map(lambda g: f"group {g}"))
    values = data[["predicted", "observed", "lower", "upper"]].stack()
    lo = max(0.0, float(values.min()) - 0.05)
    hi = min(1.0, float(values.max()) + 0.05)
    scale = alt.Scale(domain=[lo, hi], nice=False)
    x = alt.X("predicted:Q", scale=scale, title=style.x_title or "Predicted survival")
    tooltip = [
        alt.Tooltip("group:N", title="Risk group"),
        alt.Tooltip("n:Q", title="Subjects", format=","),
        alt.Tooltip("events:Q", title="Events", format=","),
        alt.Tooltip("predicted:Q", title="Predicted", format=".3f"),
        alt.Tooltip("observed:Q", title="Observed", format=".3f"),
        alt.Tooltip("lower:Q", title="Interval from", format=".3f"),
        alt.Tooltip("upper:Q", title="Interval to", format=".3f"),
    ]
    diagonal = pd.DataFrame({"predicted": [lo, hi], "observed": [lo, hi]})
    base = alt.Chart(data).encode(x=x)
    size = min(style.width, style.height)
    return alt.layer(
        alt.Chart(diagonal)
        .mark_line(color="#7A8585", strokeDash=[4, 3])
        .encode(x=x, y=alt.Y("observed:Q", scale=scale)),
        base.mark_rule(color=ACCENT, strokeWidth=style.line_width).encode(
            y=alt.Y("lower:Q", scale=scale), y2="upper:Q", tooltip=tooltip
        ),
        base.mark_point(filled=True, color=ACCENT, size=style.point_size * 2.5, opacity=1).encode(
            y=alt.Y("observed:Q", scale=scale, title=style.y_title or "Observed survival"),
            tooltip=tooltip,
        ),
    ).properties(width=size, height=size, title=chart_title(style))
