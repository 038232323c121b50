"""Demo files and roles that several app tests open (the files are rebuilt by
demo_data/make_demo_data.py)."""

from __future__ import annotations

from pathlib import Path

from engine.prepare.roles import Roles

ROOT = Path(__file__).resolve().parents[2]
PUMPS = ROOT / "demo_data" / "pump_bearings.csv"
PUMP_ROLES = Roles(
    time="months_in_service",
    unit="months",
    event="failed",
    group="supplier",
    covariates=("load_kN", "lubricant"),
    categorical=("lubricant",),
)
