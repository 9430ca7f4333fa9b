"""Generate the batch demo: monthly demand per warehouse and product family, long format.

Invented data for demos and tests (no real company): the bicycle-parts wholesaler of
``bike_parts_demand.csv`` ships from three warehouses (leeds, lyon, porto), each
selling three families of parts with two or three parts per family. Each (warehouse,
family) is one group for ``fanfold batch``; its parts are the group's series, which
feed each other with a one-month delay (a VAR(1) with seasonal intercepts, demand
peaking in early summer). Two groups are there to show failures: porto's lighting
family opened 4 months ago (too short a history to fit) and lyon's cables were only
ever sold in fixed lots (a constant series).

Columns: date (month start), warehouse, family, series (the part), value (units).
Run ``python examples/make_warehouse_demand.py`` to rewrite ``warehouse_demand.csv``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

MONTHS = 60
START = "2021-01-01"
FAMILIES = {
    "wheels": ("tyres", "inner_tubes", "rim_tape"),
    "drivetrain": ("chains", "cassettes"),
    "brakes": ("brake_pads", "brake_cables"),
}
WAREHOUSES = {"leeds": 1.0, "lyon": 0.7, "porto": 0.45}  # size relative to leeds
SEED = 20240917


def _family(rng: np.random.Generator, n: int, scale: float, months: int) -> np.ndarray:
    """(months, n) demand: a stationary VAR(1) around seasonal levels, rounded, >= 0."""
    level = scale * rng.uniform(300, 1500, size=n)
    season = 0.15 * np.sin(2 * np.pi * (np.arange(months) - 2) / 12)  # peak in June
    A = np.diag(rng.uniform(0.3, 0.6, size=n))
    A[1:, 0] = 0.25  # the family's first part leads the others by a month
    y = np.zeros((months, n))
    dev = np.zeros(n)
    for t in range(months):
        dev = A @ dev + rng.normal(0.0, 0.06, size=n) * level
        y[t] = level * (1 + season[t]) + dev
    return np.maximum(np.round(y), 0)


def make_table(seed: int = SEED) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    dates = pd.date_range(START, periods=MONTHS, freq="MS")
    parts = []
    for warehouse, scale in WAREHOUSES.items():
        for family, series in FAMILIES.items():
            values = _family(rng, len(series), scale, MONTHS)
            if (warehouse, family) == ("lyon", "brakes"):
                values[:, 1] = 120.0  # cables only sold in fixed lots: a constant series
            for j, name in enumerate(series):
                parts.append(pd.DataFrame({"date": dates.strftime("%Y-%m-%d"),
                                           "warehouse": warehouse, "family": family,
                                           "series": name, "value": values[:, j]}))
    new = _family(rng, 2, 0.3, 4)  # porto's lighting family: 4 months of history
    for j, name in enumerate(("front_lights", "rear_lights")):
        parts.append(pd.DataFrame({"date": dates[-4:].strftime("%Y-%m-%d"),
                                   "warehouse": "porto", "family": "lighting",
                                   "series": name, "value": new[:, j]}))
    table = pd.concat(parts, ignore_index=True)
    table["value"] = table["value"].astype(int)
    return table


if __name__ == "__main__":
    out = Path(__file__).with_name("warehouse_demand.csv")
    make_table().to_csv(out, index=False)
    print(f"wrote {out}")
