"""What the Curves figure draws is the engine's own estimate at each kept vertex."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from app import compute, data
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import suggest_roles
from engine.survival.curves import curves_by_group

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def pumps():
    table = read_table(ROOT / "demo_data" / "pump_bearings.csv")
    roles = suggest_roles(table.frame).to_roles(**data.DEMO_ROLES["pump_bearings.csv"])
    return table, data.curve_roles(roles)


@pytest.mark.parametrize("scale", [compute.SURVIVAL, compute.INCIDENCE])
def test_drawn_vertices_are_engine_values(pumps, scale):
    table, roles = pumps
    drawing = compute.curve_drawing(
        table.sha256, data.roles_key(roles), scale, 0.95, "log-log", True, (640, 360), None, table
    )
    curves = curves_by_group(prepare(table.frame, roles).frame).curves[1:]
    for curve in curves:
        drawn = drawing["curves"][drawing["curves"]["group"] == str(curve.label)]
        engine = (
            curve.incidence_frame().rename(columns={"incidence": "estimate"})
            if scale == compute.INCIDENCE
            else curve.to_frame().rename(columns={"survival": "estimate"})
        ).set_index("time")
        inner = drawn[drawn["time"] > 0]
        for column in ("estimate", "lower", "upper"):
            np.testing.assert_array_equal(
                inner[column].to_numpy(), engine.loc[inner["time"], column].to_numpy()
            )
        np.testing.assert_array_equal(
            inner["at_risk"].to_numpy(),
            curve.to_frame().set_index("time").loc[inner["time"], "at_risk"],
        )
        first = drawn.iloc[0]
        assert first["time"] == 0.0
        assert first["estimate"] == (1.0 if scale == compute.SURVIVAL else 0.0)
        assert drawn["time"].iloc[-1] == curve.time[-1]


def test_censoring_marks_sit_on_the_curve_at_censored_times(pumps):
    table, roles = pumps
    drawing = compute.curve_drawing(
        table.sha256,
        data.roles_key(roles),
        compute.SURVIVAL,
        0.95,
        "log-log",
        True,
        (640, 360),
        None,
        table,
    )
    curves = {str(c.label): c for c in curves_by_group(prepare(table.frame, roles).frame).curves}
    for row in drawing["censored"].itertuples(index=False):
        curve = curves[row.group]
        at = np.searchsorted(curve.time, row.time)
        assert curve.time[at] == row.time and curve.censored[at] > 0
        assert row.estimate == curve.survival[at]
