"""Small long tables for the batch tests, and tasks that misbehave on purpose."""

from __future__ import annotations

import os
from collections.abc import Sequence

import numpy as np
import pandas as pd

from service.batch.worker import ForecastSpec, GroupArrays, GroupForecast, forecast_chunk

#: fixed settings (no automatic search): a few milliseconds per small group
FAST = {"lags": 2, "tightness": 0.2, "sum_coef": None, "initial": None, "seasonal": False,
        "transforms": None, "season_scale": None}
SPEC = ForecastSpec(FAST, horizon=3, draws=40, quantiles=(0.1, 0.5, 0.9), seed=2024)


def long_table(groups: int, *, seed: int = 0) -> pd.DataFrame:
    """``groups`` (warehouse, family) groups of 2-3 series with 40-60 months each."""
    rng = np.random.default_rng(seed)
    parts = []
    for g in range(groups):
        n, T = int(rng.integers(2, 4)), int(rng.integers(40, 61))
        dates = pd.date_range("2019-01-01", periods=T, freq="MS")
        values = 200 + np.cumsum(rng.normal(0, 5, size=(T, n)), axis=0)
        for j in range(n):
            parts.append(pd.DataFrame({"date": dates, "warehouse": f"wh{g % 7}",
                                       "family": f"fam{g // 7:03d}", "series": f"part{j}",
                                       "value": values[:, j]}))
    return pd.concat(parts, ignore_index=True)


def with_bad_groups(table: pd.DataFrame) -> pd.DataFrame:
    """``table`` plus three groups that cannot be fit: too short, constant, a gap (NaN)."""
    dates = pd.date_range("2019-01-01", periods=48, freq="MS")
    rng = np.random.default_rng(99)
    bad = []

    def add(family: str, d: pd.DatetimeIndex, cols: np.ndarray) -> None:
        for j in range(cols.shape[1]):
            bad.append(pd.DataFrame({"date": d, "warehouse": "bad", "family": family,
                                     "series": f"part{j}", "value": cols[:, j]}))

    add("short", dates[:4], rng.normal(100, 5, size=(4, 2)))
    constant = rng.normal(100, 5, size=(48, 2))
    constant[:, 1] = 50.0
    add("constant", dates, constant)
    gap = rng.normal(100, 5, size=(48, 2))
    gap[20, 0] = np.nan
    add("gap", dates, gap)
    return pd.concat([table, *bad], ignore_index=True)


BAD_ERRORS = {("bad", "short"): "TooFewObservationsError",
              ("bad", "constant"): "ConstantSeriesError",
              ("bad", "gap"): "MissingValuesError"}


def dying_chunk(chunk: Sequence[GroupArrays], spec: ForecastSpec, *, victim: tuple[str, ...],
                marker: str | None) -> list[GroupForecast]:
    """A task that kills its own worker process when its chunk holds ``victim``: on the
    first attempt only (``marker`` file: created by the attempt that dies), or on every
    attempt (``marker`` None)."""
    if any(g.key == victim for g in chunk):
        if marker is None:
            os._exit(1)
        try:
            os.close(os.open(marker, os.O_CREAT | os.O_EXCL))
        except FileExistsError:
            pass
        else:
            os._exit(1)
    return forecast_chunk(chunk, spec)


def raising_chunk(chunk: Sequence[GroupArrays], spec: ForecastSpec, *,
                  victim: tuple[str, ...]) -> list[GroupForecast]:
    """A task that raises (on every attempt) when its chunk holds ``victim``."""
    if any(g.key == victim for g in chunk):
        raise OSError("the shared scratch disk is full")
    return forecast_chunk(chunk, spec)
