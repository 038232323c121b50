"""The chart builders for competing risks, parametric models and power, read as data."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from app import charts, charts_models

STYLE = charts.ChartStyle(width=300, height=200)


def _layers(spec: dict) -> list[dict]:
    out = []
    for layer in spec.get("layer", []):
        out += _layers(layer) if "layer" in layer else [layer]
    return out


def _mark(layer: dict) -> dict:
    mark = layer["mark"]
    return mark if isinstance(mark, dict) else {"type": mark}


def _data(spec: dict, layer: dict) -> pd.DataFrame:
    name = layer.get("data", {}).get("name")
    return spec["datasets"][name] if name else None


@pytest.fixture
def incidence():
    rows = pd.DataFrame(
        {
            "group": ["died"] * 3 + ["sold"] * 3,
            "time": [0.0, 1.0, 2.0] * 2,
            "estimate": [0, 0.1, 0.2, 0, 0.3, 0.5],
            "lower": [0, 0.05, 0.1, 0, 0.2, 0.4],
            "upper": [0, 0.2, 0.3, 0, 0.4, 0.6],
            "at_risk": [10, 10, 7] * 2,
        }
    )
    km = rows[["group", "time"]].assign(estimate=[0, 0.12, 0.3, 0, 0.33, 0.6])
    return rows, km


def test_incidence_chart_draws_bands_lines_and_dotted_one_minus_km(incidence):
    rows, km = incidence
    chart = charts.incidence_chart(
        rows, STYLE, charts.group_colours(["died", "sold"]), one_minus_km=km, y_domain=(0, 0.7)
    )
    chart.to_dict()  # validates against the Vega-Lite schema
    spec = charts.finish(chart, STYLE)
    layers = _layers(spec)
    marks = [_mark(layer) for layer in layers]
    assert any(m["type"] == "area" for m in marks)  # the bands
    dotted = [m for m in marks if m.get("strokeDash") == [2, 3]]
    assert len(dotted) == 1 and dotted[0]["interpolate"] == "step-after"
    km_layer = next(layer for layer in layers if _mark(layer).get("strokeDash") == [2, 3])
    assert _data(spec, km_layer)["estimate"].tolist() == km["estimate"].tolist()
    assert km_layer["encoding"]["y"]["scale"]["domain"] == [0, 0.7]


def test_incidence_chart_without_the_comparison_is_the_step_chart(incidence):
    rows, _ = incidence
    spec = charts.finish(
        charts.incidence_chart(rows, STYLE, charts.group_colours(["died", "sold"])), STYLE
    )
    assert not any(_mark(layer).get("strokeDash") == [2, 3] for layer in _layers(spec))


def test_parametric_chart_dashes_and_shades_only_the_extrapolation():
    time = np.linspace(0, 20, 21)
    fitted = pd.concat(
        [
            pd.DataFrame(
                {
                    "distribution": name,
                    "time": time,
                    "survival": np.exp(-rate * time),
                    "extrapolated": time > 10,
                }
            )
            for name, rate in (("Weibull", 0.05), ("Exponential", 0.07))
        ],
        ignore_index=True,
    )
    km = pd.DataFrame({"time": [0.0, 4.0, 10.0], "estimate": [1.0, 0.8, 0.6]})
    spec = charts.finish(
        charts_models.parametric_chart(km, fitted, STYLE, max_time=10.0, x_max=20.0), STYLE
    )
    layers = _layers(spec)
    shade = next(layer for layer in layers if _mark(layer)["type"] == "rect")
    assert _data(spec, shade)[["start", "end"]].values.tolist() == [[10.0, 20.0]]
    text = next(layer for layer in layers if _mark(layer)["type"] == "text")
    assert _data(spec, text)["label"].tolist() == ["extrapolation"]
    dashed = next(layer for layer in layers if _mark(layer).get("strokeDash") == [6, 4])
    beyond = _data(spec, dashed)
    # the dashed part starts at the last time inside follow-up, then only extrapolated rows
    assert beyond.groupby("distribution")["time"].min().tolist() == [10.0, 10.0]
    assert beyond["extrapolated"].sum() == 20
    solid = [
        layer for layer in layers
        if _mark(layer)["type"] == "line" and "strokeDash" not in _mark(layer)
        and "distribution" in str(layer["encoding"].get("color", {}))
    ]  # fmt: skip
    assert not _data(spec, solid[0])["extrapolated"].any()


def test_parametric_chart_within_follow_up_has_no_extrapolation_marks():
    fitted = pd.DataFrame(
        {"distribution": "Weibull", "time": [0.0, 5.0], "survival": [1.0, 0.7],
         "extrapolated": [False, False]}
    )  # fmt: skip
    km = pd.DataFrame({"time": [0.0, 5.0], "estimate": [1.0, 0.7]})
    spec = charts.finish(
        charts_models.parametric_chart(km, fitted, STYLE, max_time=5.0, x_max=5.0), STYLE
    )
    types = [_mark(layer)["type"] for layer in _layers(spec)]
    assert "rect" not in types and not any(_mark(x).get("strokeDash") for x in _layers(spec))


def test_power_chart_lines_per_formula_and_side_with_target_rules():
    curve = pd.DataFrame(
        {
            "method": ["Schoenfeld (1983)"] * 4 + ["Freedman (1982)"] * 4,
            "hazard_ratio": [0.5, 0.9, 1.1, 2.0] * 2,
            "power": [0.9, 0.1, 0.1, 0.9, 0.88, 0.1, 0.1, 0.87],
        }
    )
    spec = charts.finish(
        charts_models.power_chart(curve, STYLE, target_hr=0.7, target_power=0.8), STYLE
    )
    layers = _layers(spec)
    line = next(layer for layer in layers if _mark(layer)["type"] == "line")
    assert line["encoding"]["detail"]["field"] == "side"
    assert line["encoding"]["x"]["scale"]["type"] == "log"
    data = _data(spec, line)
    assert data.loc[data["hazard_ratio"] > 1, "side"].eq("above").all()
    rules = [layer for layer in layers if _mark(layer)["type"] == "rule"]
    values = sorted(float(_data(spec, r).iloc[0, 0]) for r in rules)
    assert values == [0.7, 0.8]


def test_incidence_legend_names_the_group_column_beside_the_cause(tmp_path):
    """Curves by group and cause are labelled 'a: died'; the heading says which column the
    'a' comes from ('arm: cause'), never a bare 'Group: cause'."""
    from app import batch
    from engine.io.tables import read_table
    from engine.prepare.checks import prepare
    from engine.prepare.roles import suggest_roles

    rng = np.random.default_rng(26)
    n = 200
    status = rng.choice(["died", "moved", "alive"], n)
    pd.DataFrame(
        {"weeks": np.round(rng.exponential(20, n), 1) + 0.1, "status": status,
         "arm": rng.choice(["a", "b"], n)}
    ).to_csv(tmp_path / "two_causes.csv", index=False)  # fmt: skip
    table = read_table(tmp_path / "two_causes.csv")
    roles = suggest_roles(table.frame).to_roles(
        time="weeks", event="status", event_values=("died",), group="arm",
        event_causes=(("died", "died"), ("moved", "moved")),
    )  # fmt: skip
    prepared = prepare(table.frame, roles)
    texts = []
    for by_group in (True, False):
        spec = batch.incidence_figure(prepared, {"competing": {"by_group": by_group}})
        frames = [f for f in spec["datasets"].values() if isinstance(f, pd.DataFrame)]
        texts.append(" ".join([str(spec), *(f.to_string() for f in frames)]))
    assert "arm: cause" in texts[0] and "Group: cause" not in texts[0]
    assert "arm: cause" not in texts[1]
    assert charts.incidence_legend_title(None) == "Cause"
