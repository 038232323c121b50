"""Chart builders read as data (``chart.to_dict()``, validated against the Vega-Lite schema)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from altair.vegalite.v6.schema.core import Root

from app import charts, charts_models, exports

STYLE = charts.ChartStyle()


def _curves() -> pd.DataFrame:
    rows = []
    for label, rate in (("A", 0.1), ("B", 0.2)):
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


def test_step_curve_has_band_line_tooltips_and_censor_marks():
    censored = pd.DataFrame({"group": ["A"], "time": [2.5], "estimate": [0.78]})
    chart = charts.step_curve_chart(
        _curves(),
        STYLE.titled("Survival", "Time (months)", "Survival"),
        charts.group_colours(["A", "B"]),
        censored=censored,
        ticks=[0, 1, 2, 3, 4, 5],
    )
    spec = chart.to_dict()
    marks = [layer["mark"]["type"] for layer in _layers(spec)]
    assert marks == ["area", "line", "point", "tick"]
    area, line, hover, tick = _layers(spec)
    assert area["mark"]["interpolate"] == "step-after"
    assert line["mark"]["interpolate"] == "step-after"
    assert area["encoding"]["y"]["field"] == "lower"
    assert area["encoding"]["y2"]["field"] == "upper"
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
    assert _data(spec, tick) == [{"group": "A", "time": 2.5, "estimate": 0.78}]
    assert len(_data(spec, line)) == 10
    assert spec["title"]["text"] == "Survival"


def test_band_and_censor_marks_can_be_switched_off():
    chart = charts.step_curve_chart(
        _curves(), STYLE, charts.group_colours(["A", "B"]), band=False, censored=None
    )
    assert [layer["mark"]["type"] for layer in _layers(chart.to_dict())] == ["line", "point"]


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
    top_x = top["layer"][1]["encoding"]["x"]
    bottom_x = bottom["encoding"]["x"]
    assert top_x["scale"]["domain"] == bottom_x["scale"]["domain"] == [0, 5.0]
    assert top_x["axis"]["values"] == bottom_x["axis"]["values"] == ticks
    assert top["width"] == bottom["width"] == STYLE.width
    top_y = top["layer"][1]["encoding"]["y"]["axis"]
    bottom_y = bottom["encoding"]["y"]["axis"]
    assert (
        top_y["minExtent"] == top_y["maxExtent"] == bottom_y["minExtent"] == bottom_y["maxExtent"]
    )
    assert bottom["encoding"]["text"]["field"] == "at_risk"


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
    scales = [
        layer["encoding"]["x"]["scale"]["type"]
        for layer in spec["layer"]
        if "scale" in layer["encoding"].get("x", {})
    ]
    assert scales and set(scales) == {"log"}
    filters = [t["filter"] for layer in spec["layer"] for t in layer.get("transform", [])]
    assert "datum.is_reference" in filters and "!datum.is_reference" in filters
    assert spec["layer"][1]["encoding"]["y"]["sort"] == list(rows["label"])


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
