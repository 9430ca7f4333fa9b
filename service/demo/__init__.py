"""The bicycle-parts demo data, shipped with the package for ``fanfold serve --demo``.

A copy of ``examples/bike_parts_demand.csv`` (a test keeps them identical).
"""

from __future__ import annotations

from importlib.resources import files

import pandas as pd

__all__ = ["demo_frame"]


def demo_frame() -> pd.DataFrame:
    with (files(__package__) / "bike_parts_demand.csv").open("r", encoding="utf-8") as fh:
        return pd.read_csv(fh, index_col=0, parse_dates=True)
