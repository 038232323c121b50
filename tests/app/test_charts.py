"""Chart builders read as data (``chart.to_dict()``, validated against the Vega-Lite schema)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from altair.vegalite.v6.schema.core import Root

from app import charts, charts_models, exports

STYLE = charts.ChartStyle()


def _curves(labels=("A", "B")) -> pd.DataFrame:
    rows = []
    for label, rate in zip(labels, (0.1, 0.2, 0.3, 0.4), strict=False):
        time = np.array([0.0, 1.0, 2.0, 3.5, 5.0])
        survival = np.exp(-rate * time)
        rows.append(
            pd.DataFrame(
                {
                    "group": label,
                    "time": time,
                    "estimate": survival,
                    "lower": survival * 0.9,
                    "upper": np.minimum(survival * 1.1, 1),
                    "at_risk": [10, 9, 7, 4, 2],
                }
            )
        )
    return pd.concat(rows, ignore_index=True)


def _layers(spec: dict) -> list[dict]:
    return spec["layer"]


def _data(spec: dict, layer: dict) -> list[dict]:
    name = (layer.get("data") or spec["data"])["name"]
    return spec["datasets"][name]


def test_step_curve_has_band_line_tooltips_censor_marks_and_end_labels():
    censored = pd.DataFrame({"group": ["A"], "time": [2.5], "estimate": [0.78]})
    chart = charts.step_curve_chart(
        _curves(),
        STYLE.titled("Survival", "Time (months)", "Survival"),
        charts.group_colours(["A", "B"]),
        censored=censored,
        ticks=[0, 1, 2, 3, 4, 5],
        legend_title="Group: arm",
    )
    spec = chart.to_dict()
    marks = [layer["mark"]["type"] for layer in _layers(spec)]
    assert marks == ["area", "line", "line", "line", "point", "text", "text", "point"]
    area, low, high, line, pole, names, heading, hover = _layers(spec)
    assert area["mark"]["interpolate"] == "step-after"
    assert line["mark"]["interpolate"] == "step-after"
    assert area["encoding"]["y"]["field"] == "lower"
    assert area["encoding"]["y2"]["field"] == "upper"
    # the interval's edges are thin dotted lines
    assert (low["encoding"]["y"]["field"], high["encoding"]["y"]["field"]) == ("lower", "upper")
    assert low["mark"]["strokeDash"] == [1, 2]
    assert {t["field"] for t in hover["encoding"]["tooltip"]} == {
        "group",
        "time",
        "estimate",
        "lower",
        "upper",
        "at_risk",
    }
    assert line["encoding"]["x"]["axis"]["values"] == [0, 1, 2, 3, 4, 5]
    assert line["encoding"]["color"]["scale"]["range"] == list(charts.PALETTE[:2])
    # censored times: a short pole standing on the curve, not a cross
    assert pole["mark"]["shape"] == charts.CENSOR_SHAPE and pole["mark"]["filled"] is False
    assert _data(spec, pole) == [{"group": "A", "time": 2.5, "estimate": 0.78}]
    assert len(_data(spec, line)) == 10
    # each curve is named at its right-hand end, under the words "Group: arm"; no legend
    ends = _data(spec, names)
    assert [row["group"] for row in ends] == ["A", "B"]  # top to bottom
    assert all(row["time"] == 5.0 for row in ends)
    assert names["encoding"]["y"]["scale"] is None  # nudged positions, in pixels
    assert _data(spec, heading) == [{"time": 5.0, "text": "Group: arm"}]
    assert line["encoding"]["color"]["legend"] is None
    assert spec["title"]["text"] == "Survival"


def test_colliding_end_labels_give_way_to_a_legend_on_the_right():
    rows = []
    names = ["first group", "second group", "third", "fourth", "fifth", "sixth"]
    for label in names:
        rows.append(
            pd.DataFrame({"group": label, "time": [0.0, 5.0], "estimate": [1.0, 0.5]})
        )  # every curve ends at the same point: their names cannot all sit there
    chart = charts.step_curve_chart(
        pd.concat(rows),
        STYLE,
        charts.group_colours(names),
        band=False,
        legend_title="Group: site",
    )
    spec = chart.to_dict()
    assert [layer["mark"]["type"] for layer in _layers(spec)] == ["line", "point"]  # no names
    legend = _layers(spec)[0]["encoding"]["color"]["legend"]
    assert legend["title"] == "Group: site" and legend["orient"] == "right"


def test_end_labels_are_nudged_apart_when_close():
    curves = pd.DataFrame(
        {
            "group": ["A", "A", "B", "B"],
            "time": [0.0, 5.0, 0.0, 5.0],
            "estimate": [1.0, 0.50, 1.0, 0.49],
        }
    )
    labels = charts.end_labels(curves, STYLE, (0.0, 5.0), (0.0, 1.0))
    assert labels is not None
    gap = labels["y_px"].diff().iloc[1]
    assert gap >= STYLE.font_size * 1.25 - 1e-9  # at least one line apart


@pytest.mark.parametrize(
    ("ticks", "expected"),
    [
        ([0, 2.5, 5, 7.5, 10, 12.5], ",.1f"),  # 2.5 stays 2.5, never "3"
        ([0, 10, 20, 30], ",.0f"),
        ([0, 0.25, 0.5, 0.75], ",.2f"),
        ([0, 0.2, 0.4, 0.6000000000000001], ",.1f"),
        ([0.0], ",.0f"),
    ],
)
def test_tick_labels_have_the_decimals_of_their_step(ticks, expected):
    assert charts.tick_format(ticks) == expected


def test_half_step_ticks_are_labelled_with_their_half():
    # A month axis with a 2.5 step: the labels must read 2.5, 7.5, 12.5 (vl-convert renders
    # the axis as Vega would in the browser).
    ticks = charts.nice_ticks(13.0, count=7)
    assert ticks == [0, 2.5, 5.0, 7.5, 10.0, 12.5]
    chart = charts.step_curve_chart(
        _curves().assign(time=lambda f: f["time"] * 2.6),
        STYLE,
        charts.group_colours(["A", "B"]),
        ticks=ticks,
        x_max=13.0,
        legend_title=None,
    )
    svg = exports.figure_svg(charts.finish(chart, STYLE))
    for label in ("2.5", "7.5", "12.5"):
        assert f">{label}</text>" in svg
    assert ">3</text>" not in svg and ">13</text>" not in svg


def test_band_and_censor_marks_can_be_switched_off():
    chart = charts.step_curve_chart(
        _curves(), STYLE, charts.group_colours(["A", "B"]), band=False, censored=None
    )
    assert [layer["mark"]["type"] for layer in _layers(chart.to_dict())] == [
        "line",
        "text",
        "point",
    ]  # the curves' names at their ends remain


def test_a_group_keeps_its_colour_whatever_is_drawn():
    colours = charts.group_colours(["A", "B", "C"])
    only_c = _curves().assign(group="C")
    spec = charts.step_curve_chart(only_c, STYLE, colours).to_dict()
    scale = spec["layer"][1]["encoding"]["color"]["scale"]
    assert scale["domain"] == ["C"]
    assert scale["range"] == [charts.PALETTE[2]]


def test_palette_is_okabe_ito():
    # Okabe & Ito (2008), Color Universal Design: the eight colours, in any order.
    okabe_ito = {
        "#E69F00",
        "#56B4E9",
        "#009E73",
        "#F0E442",
        "#0072B2",
        "#D55E00",
        "#CC79A7",
        "#000000",
    }
    assert set(charts.PALETTE) == okabe_ito


def test_numbers_at_risk_share_the_curve_ticks_and_axis_width():
    ticks = charts.nice_ticks(5.0)
    curve = charts.step_curve_chart(
        _curves(),
        STYLE,
        charts.group_colours(["A", "B"]),
        ticks=ticks,
        x_max=5.0,
        align_with_table=True,
    )
    table = pd.DataFrame(
        {"group": ["A", "A", "B", "B"], "time": [0.0, 2.0, 0.0, 2.0], "at_risk": [10, 7, 10, 5]}
    )
    risk = charts.at_risk_chart(
        table, STYLE, charts.group_colours(["A", "B"]), x_max=5.0, ticks=ticks
    )
    spec = charts.curve_with_risk_table(curve, risk, STYLE).to_dict()
    top, bottom = spec["vconcat"]
    line = [layer for layer in top["layer"] if layer["mark"]["type"] == "line"][-1]
    key_line, names, counts = bottom["layer"]
    top_x, bottom_x = line["encoding"]["x"], counts["encoding"]["x"]
    assert top_x["scale"]["domain"] == bottom_x["scale"]["domain"] == [0, 5.0]
    assert top_x["axis"]["values"] == bottom_x["axis"]["values"] == ticks
    assert top_x["axis"]["format"] == charts.tick_format(ticks)
    assert top["width"] == bottom["width"] == STYLE.width
    top_y = line["encoding"]["y"]["axis"]
    bottom_y = counts["encoding"]["y"]["axis"]
    assert (
        top_y["minExtent"] == top_y["maxExtent"] == bottom_y["minExtent"] == bottom_y["maxExtent"]
    )
    # the counts are dark text, not bold and not in the group colours
    assert counts["encoding"]["text"]["field"] == "at_risk"
    assert counts["mark"]["color"] == charts.INK and "fontWeight" not in counts["mark"]
    assert "color" not in counts["encoding"]
    # each row is named after a short line in its group's colour
    assert key_line["mark"]["type"] == "rule"
    assert key_line["encoding"]["color"]["scale"]["range"] == list(charts.PALETTE[:2])
    assert names["encoding"]["text"]["field"] == "group"
    assert bottom["title"]["text"] == "Subjects still at risk"


@pytest.mark.parametrize(
    ("upper", "expected"),
    [(70.0, [0, 10, 20, 30, 40, 50, 60, 70]), (1.0, [0, 0.2, 0.4, 0.6, 0.8, 1.0]), (0.0, [0.0])],
)
def test_nice_ticks(upper, expected):
    assert charts.nice_ticks(upper) == pytest.approx(expected)


def test_forest_plot_uses_a_log_axis_and_marks_reference_rows():
    rows = pd.DataFrame(
        {
            "label": ["age", "diet: A (reference)", "diet: B"],
            "hazard_ratio": [1.05, 1.0, 0.6],
            "lower": [1.01, None, 0.4],
            "upper": [1.09, None, 0.9],
            "is_reference": [False, True, False],
            "p_text": ["0.01", "reference", "0.02"],
        }
    )
    spec = charts_models.forest_chart(rows, STYLE).to_dict()
    plot, text = spec["hconcat"]
    scales = [
        layer["encoding"]["x"]["scale"]["type"]
        for layer in plot["layer"]
        if "scale" in layer["encoding"].get("x", {})
    ]
    assert scales and set(scales) == {"log"}
    filters = [t["filter"] for layer in plot["layer"] for t in layer.get("transform", [])]
    assert "datum.is_reference" in filters and "!datum.is_reference" in filters
    assert plot["layer"][1]["encoding"]["y"]["sort"] == list(rows["label"])
    # single estimates are squares, not the diamonds of pooled estimates
    marks = [layer["mark"]["type"] for layer in plot["layer"]]
    assert "square" in marks and all(
        layer["mark"].get("shape") != "diamond" for layer in plot["layer"]
    )
    # the text column states each hazard ratio with its interval, and the confidence level
    assert text["encoding"]["text"]["field"] == "hr_text"
    assert text["title"]["text"] == "HR (95% CI)"
    assert "95% CI" in plot["layer"][1]["encoding"]["x"]["title"]


def test_forest_plot_domain_holds_every_interval_limit():
    # An upper limit past 2 (2.017) must not be cut at the axis end.
    rows = pd.DataFrame(
        {
            "label": ["a", "b"],
            "hazard_ratio": [1.4, 0.3],
            "lower": [0.97, 0.05],
            "upper": [2.017, 1.8],
            "is_reference": [False, False],
            "p_text": ["0.07", "0.2"],
        }
    )
    low, high = charts_models.forest_domain(rows)
    assert low < 0.05 and high > 2.017
    spec = charts_models.forest_chart(rows, STYLE, confidence=0.9).to_dict()
    domain = spec["hconcat"][0]["layer"][0]["encoding"]["x"]["scale"]["domain"]
    assert domain[0] < 0.05 and domain[1] > 2.017
    assert spec["hconcat"][1]["title"]["text"] == "HR (90% CI)"
    (drawn,) = [d for d in spec["datasets"].values() if d and "hr_text" in d[0]]
    assert [row["hr_text"] for row in drawn] == ["1.40 (0.97 to 2.02)", "0.30 (0.050 to 1.80)"]


def test_residual_plot_has_dots_and_a_loess_smoother():
    points = pd.DataFrame({"x": np.linspace(0, 1, 30), "residual": np.sin(np.linspace(0, 3, 30))})
    spec = charts_models.residual_chart(points, STYLE, x_title="time", y_title="residual").to_dict()
    loess = [t for layer in spec["layer"] for t in layer.get("transform", []) if "loess" in t]
    assert loess == [{"loess": "residual", "on": "x", "bandwidth": 0.5}]
    assert spec["layer"][0]["mark"]["type"] == "rule"


def test_log_minus_log_chart_draws_one_line_per_level():
    lines = pd.DataFrame(
        {"group": ["a", "a", "b", "b"], "log_time": [0, 1, 0, 1], "value": [-2, -1, -1.5, -0.5]}
    )
    spec = charts_models.log_minus_log_chart(
        lines, STYLE, charts.group_colours(["a", "b"]), legend_title="diet"
    ).to_dict()
    assert spec["encoding"]["color"]["field"] == "group"
    assert spec["mark"]["interpolate"] == "step-after"


def test_presentation_style_is_larger():
    small, large = charts.ChartStyle(), charts.ChartStyle.presentation()
    assert large.font_size > small.font_size
    assert large.line_width > small.line_width
    assert large.width > small.width


def test_finished_spec_is_valid_vega_lite_with_the_house_config():
    chart = charts.step_curve_chart(_curves(), STYLE, charts.group_colours(["A", "B"]))
    large = charts.ChartStyle.presentation()
    spec = charts.finish(chart, large)
    assert spec["config"]["axis"]["labelFontSize"] == large.font_size
    assert isinstance(spec["datasets"]["data-0"], pd.DataFrame)  # sent to the browser as Arrow
    Root.validate(exports.json_spec(spec))


def test_long_labels_are_cut_in_figures_and_stay_distinct():
    """Issue 10 (the large fuzz run): a 100,000-character group label made the figure renderer
    run for minutes (10,000 characters: 37 s). A figure shows at most FIGURE_TEXT_LIMIT
    characters of a label, with a fingerprint so that labels that begin alike stay apart."""
    first, second = "x" * 100_000 + "1", "x" * 100_000 + "2"
    labels = [first, second, "short"]
    spec = charts.finish(
        charts.step_curve_chart(_curves(labels), STYLE, charts.group_colours(labels)), STYLE
    )
    shown = {
        row["group"]
        for frame in spec["datasets"].values()
        if isinstance(frame, pd.DataFrame) and "group" in frame.columns
        for row in frame.to_dict("records")
    }
    assert "short" in shown and len(shown) == 3
    assert max(len(label) for label in shown) <= charts.FIGURE_TEXT_LIMIT
    assert all(len(text) <= charts.FIGURE_TEXT_LIMIT for text in _strings(spec))
    assert exports.figure_svg(spec).startswith("<svg")


def _strings(value):
    if isinstance(value, str):
        yield value
    elif isinstance(value, dict):
        for key, item in value.items():
            yield from _strings(key)
            yield from _strings(item)
    elif isinstance(value, list):
        for item in value:
            yield from _strings(item)


def test_ticks_of_subnormal_times_are_the_ends():
    assert charts.nice_ticks(1e-323) == [0.0, 1e-323]
    assert charts.nice_ticks(5e-324) == [0.0, 5e-324]


def test_a_line_break_in_a_label_does_not_break_the_image_export():
    """Found by the large fuzz run (9 crashes in 1,500 cases): a categorical level "a\\nb" in the
    residual plot's axis title reached a tooltip title, where the line break broke the
    renderer's expression parser."""
    points = pd.DataFrame({"x": [0.1, 0.5, 0.9], "residual": [0.2, -0.1, 0.3]})
    chart = charts_models.residual_chart(
        points, STYLE, x_title="Time", y_title="β(t) for c1: a\nb vs c", zero_line=0.1
    )
    spec = charts.finish(chart, STYLE)
    assert not any("\n" in text for text in _strings(spec))
    assert exports.figure_svg(spec).startswith("<svg")


@pytest.mark.parametrize("label", ['{"v": "\\""}', "ends in a backslash \\", 'C:\\data\\"x"'])
def test_a_backslash_in_a_label_does_not_break_the_image_export(label):
    """Found by the large fuzz run (seed 404, 2 crashes in 10,000 cases): the renderer quotes a
    tooltip title without escaping its backslashes, so a categorical level holding \\" broke
    its expression parser. Backslashes are drawn as the look-alike U+29F5, in the titles and in
    the data alike, so a legend's domain still matches its rows."""
    points = pd.DataFrame({"x": [0.1, 0.5, 0.9], "residual": [0.2, -0.1, 0.3]})
    chart = charts_models.residual_chart(
        points, STYLE, x_title="Time", y_title=f"β(t) for c1: {label} vs c", zero_line=0.1
    )
    spec = charts.finish(chart, STYLE)
    assert not any("\\" in text for text in _strings(spec))
    assert exports.figure_svg(spec).startswith("<svg")
    frame = pd.DataFrame({"group": [label, "plain"], "n": [1, 2]})
    shown = charts.visible_spec({"domain": [label, "plain"], "data": frame})
    assert shown["domain"] == list(shown["data"]["group"])
