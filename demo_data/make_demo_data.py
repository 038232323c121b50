"""Rebuild the invented demo datasets: ``python demo_data/make_demo_data.py``.

Every scenario is made up; the numbers come from a seeded generator, not from any real study.
The columns, units and codings are documented in demo_data/README.md.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
SEED = 20261202


def joint_trial(rng: np.random.Generator, n: int = 420) -> pd.DataFrame:
    """Fictional veterinary trial: two joint supplements for dogs; time to lameness relapse."""
    arm = rng.choice(["Formula A", "Formula B"], size=n)
    breed_size = rng.choice(["small", "medium", "large", "giant"], size=n, p=[0.2, 0.35, 0.3, 0.15])
    weight = {"small": 8, "medium": 18, "large": 32, "giant": 55}
    weight_kg = np.round([rng.normal(weight[b], weight[b] * 0.15) for b in breed_size], 1)
    age_years = np.round(rng.uniform(2, 13, n), 1)
    log_hazard = (
        -6.3 + 0.45 * (arm == "Formula A") + 0.08 * (age_years - 7) + 0.012 * (weight_kg - 25)
    )
    relapse_days = rng.exponential(1 / np.exp(log_hazard))
    enrolled = pd.Timestamp("2024-03-01") + pd.to_timedelta(rng.integers(0, 270, n), unit="D")
    study_end = pd.Timestamp("2025-12-31")
    admin_days = (study_end - enrolled).days.to_numpy()
    lost_days = rng.exponential(2500, n)
    days = np.minimum.reduce([relapse_days, admin_days, lost_days]).astype(int) + 1
    outcome = np.where(
        relapse_days <= np.minimum(admin_days, lost_days),
        "relapsed",
        np.where(lost_days < admin_days, "lost to follow-up", "event-free"),
    )
    last_visit = enrolled + pd.to_timedelta(days, unit="D")
    frame = pd.DataFrame(
        {
            "dog_id": [f"D{i:04d}" for i in range(1, n + 1)],
            "clinic": rng.choice(["Riverside", "Hilltop", "Old Mill"], size=n),
            "arm": arm,
            "breed_size": breed_size,
            "weight_kg": weight_kg,
            "age_years": age_years,
            "enrolled": enrolled.strftime("%d/%m/%Y"),
            "last_visit": last_visit.strftime("%d/%m/%Y"),
            "outcome": outcome,
        }
    )
    # A few records as they arrive from clinics: missing visit dates and weights.
    frame.loc[rng.choice(n, 3, replace=False), "last_visit"] = ""
    frame.loc[rng.choice(n, 2, replace=False), "weight_kg"] = np.nan
    return frame


def pump_bearings(rng: np.random.Generator, n: int = 1500) -> pd.DataFrame:
    """Invented field data: bearings from four suppliers in water pumps; months to failure."""
    suppliers = np.array(["Ashford", "Brightmoor", "Kestrel", "Northwind"])
    supplier = rng.choice(suppliers, size=n, p=[0.3, 0.25, 0.25, 0.2])
    supplier_effect = {"Ashford": 0.0, "Brightmoor": 0.35, "Kestrel": -0.4, "Northwind": 0.7}
    lubricant = rng.choice(["grease", "oil bath", "dry film"], size=n, p=[0.5, 0.35, 0.15])
    lube_effect = {"grease": 0.0, "oil bath": -0.3, "dry film": 0.5}
    load_kn = np.round(rng.gamma(6, 2.0, n), 1)
    temperature_c = np.round(rng.normal(55, 8, n), 1)
    site = rng.choice(["north plant", "south plant", "harbour"], size=n)
    linear = (
        np.array([supplier_effect[s] for s in supplier])
        + np.array([lube_effect[x] for x in lubricant])
        + 0.05 * (load_kn - 12)
        + 0.02 * (temperature_c - 55)
    )
    shape = 1.4
    scale = 48 * np.exp(-linear / shape)
    failure = scale * rng.weibull(shape, n)
    installed_ago = rng.uniform(6, 72, n)  # months between installation and the data pull
    months = np.round(np.minimum(failure, installed_ago), 2)
    frame = pd.DataFrame(
        {
            "bearing_serial": [f"BR-{100000 + i}" for i in range(n)],
            "supplier": supplier,
            "lubricant": lubricant,
            "site": site,
            "load_kN": load_kn,
            "temperature_C": temperature_c,
            "months_in_service": months,
            "failed": (failure <= installed_ago).astype(int),
        }
    )
    for column, share in (("load_kN", 0.03), ("temperature_C", 0.05), ("lubricant", 0.02)):
        frame.loc[rng.random(n) < share, column] = None
    return frame


def dairy_herd(rng: np.random.Generator, n: int = 900) -> pd.DataFrame:
    """Invented dairy herd records: weeks from first calving until a cow is sold or dies."""
    farm = rng.choice(["Meadowbank", "Clayfield", "Westbrook"], size=n)
    housing = rng.choice(["free stall", "straw yard"], size=n, p=[0.6, 0.4])
    first_calving_age_months = np.round(rng.normal(26, 2.5, n), 1)
    farm_sale = {"Meadowbank": 1.0, "Clayfield": 1.4, "Westbrook": 0.8}
    sale_rate = np.array([farm_sale[f] for f in farm]) / 150
    death_rate = np.where(housing == "straw yard", 1 / 500, 1 / 800)
    sold = rng.exponential(1 / sale_rate)
    died = rng.exponential(1 / death_rate)
    follow = rng.uniform(20, 260, n)
    weeks = np.minimum.reduce([sold, died, follow])
    status = np.where(weeks == sold, "sold", np.where(weeks == died, "died", "in herd"))
    return pd.DataFrame(
        {
            "cow_id": np.arange(1, n + 1),
            "farm": farm,
            "housing": housing,
            "first_calving_age_months": first_calving_age_months,
            "weeks": np.round(weeks, 1),
            "status": status,
        }
    )


def compressor_service(rng: np.random.Generator, n: int = 500) -> pd.DataFrame:
    """Invented service records: air compressors followed for up to two years, one row per
    stretch between service visits (episodes), failures repaired and counted again."""
    sites = {"quarry": 27.0, "harbour": 14.0, "mill": 20.0}
    rows = []
    for unit in range(1, n + 1):
        coating = "ceramic" if rng.random() < 0.5 else "standard"
        site = str(rng.choice(list(sites)))
        ambient = round(float(sites[site] + rng.normal(0, 4)), 1)
        update_day = rng.uniform(150, 600) if rng.random() < 0.6 else np.inf
        end_of_follow_up = rng.uniform(300, 730)
        day, vibration = 0.0, rng.normal(3.5, 0.6)
        while day < end_of_follow_up:
            visit = min(day + rng.uniform(60, 120), end_of_follow_up)
            firmware = "v2" if day >= update_day else "v1"
            log_rate = (
                np.log(1 / 500)
                + 0.35 * (vibration - 3.5)
                + 0.005 * (ambient - 19) ** 2  # too hot or too cold: not a straight line
                - 0.3 * (firmware == "v2")
            )
            # The coating protects for the first year only (a hazard ratio that changes).
            start, stop, failed = day, visit, 0
            for edge_from, edge_to in ((start, min(stop, 365.0)), (max(start, 365.0), stop)):
                if edge_to <= edge_from or failed:
                    continue
                early = edge_to <= 365.0
                rate = np.exp(log_rate - (0.7 if coating == "ceramic" and early else 0.0))
                at = edge_from + rng.exponential(1 / rate)
                if at < edge_to:
                    stop, failed = max(at, start + 0.1), 1
            rows.append(
                {
                    "unit_id": f"C{unit:04d}", "site": site, "coating": coating,
                    "ambient_C": ambient, "firmware": firmware,
                    "vibration_mm_s": round(float(vibration), 2), "from_day": round(start, 1),
                    "to_day": round(stop, 1), "failed": failed,
                }
            )  # fmt: skip
            day = max(rows[-1]["to_day"], start + 0.1)
            vibration = max(0.5, vibration + rng.normal(0.15, 0.25))
    return pd.DataFrame(rows)


def main() -> None:
    rng = np.random.default_rng(SEED)
    joint_trial(rng).to_csv(HERE / "joint_trial.csv", index=False)
    pump_bearings(rng).to_csv(HERE / "pump_bearings.csv", index=False)
    dairy_herd(rng).to_csv(HERE / "dairy_herd.csv", index=False)
    # Its own generator, so adding it left the files above unchanged.
    service = compressor_service(np.random.default_rng(SEED + 4))
    service.to_csv(HERE / "compressor_service.csv", index=False)


if __name__ == "__main__":
    main()
