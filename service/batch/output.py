"""The batch's results as tables, and writing them as Parquet or CSV.

Two tables. ``forecasts``: one row per group, series and forecast date with the group's
key columns, ``series``, ``date``, ``step``, ``mean`` and ``q<level>`` per quantile
level (``q0.05``, ``q0.5``, ...). ``status``: one row per input group, its key columns,
``status`` ("ok" or "failed"), ``error_type`` and ``error`` (empty when ok), ``series``
(how many), ``periods`` (rows of data), ``lags`` (chosen), ``seconds``.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from ..serialization import quantile_key
from .worker import GroupForecast

__all__ = ["forecast_frame", "quantile_column", "status_frame", "status_path", "write_table"]


def quantile_column(level: float) -> str:
    return f"q{quantile_key(level)}"


def forecast_frame(outcomes: Sequence[GroupForecast], key_names: Sequence[str],
                   quantiles: Sequence[float]) -> pd.DataFrame:
    """The forecasts of the groups that succeeded, one row per (group, series, date)."""
    parts = []
    for g in outcomes:
        if not g.ok:
            continue
        assert g.mean is not None and g.quantiles is not None and g.dates is not None
        h, n = g.mean.shape
        part: dict[str, object] = {name: [label] * (h * n)
                                   for name, label in zip(key_names, g.key, strict=True)}
        part["series"] = np.repeat(np.array(g.names, dtype=object), h)
        part["date"] = np.tile(g.dates, n)
        part["step"] = np.tile(np.arange(1, h + 1), n)
        part["mean"] = g.mean.T.ravel()
        for i, level in enumerate(quantiles):
            part[quantile_column(level)] = g.quantiles[i].T.ravel()
        parts.append(pd.DataFrame(part))
    columns = [*key_names, "series", "date", "step", "mean",
               *(quantile_column(q) for q in quantiles)]
    if not parts:
        return pd.DataFrame({c: pd.Series(dtype="datetime64[ns]" if c == "date" else
                                          "float64" if c == "mean" or c.startswith("q")
                                          else object) for c in columns})
    return pd.concat(parts, ignore_index=True)[columns]


def status_frame(outcomes: Sequence[GroupForecast], key_names: Sequence[str]
                 ) -> pd.DataFrame:
    """One row per group: whether it was forecast, and why not."""
    rows = [{**dict(zip(key_names, g.key, strict=True)),
             "status": "ok" if g.ok else "failed", "error_type": g.error_type or "",
             "error": g.error or "", "series": len(g.names), "periods": g.periods,
             "lags": g.lags, "seconds": round(g.seconds, 4)} for g in outcomes]
    frame = pd.DataFrame(rows, columns=[*key_names, "status", "error_type", "error",
                                        "series", "periods", "lags", "seconds"])
    frame["lags"] = frame["lags"].astype("Int64")
    return frame


def status_path(out: str | Path) -> Path:
    """Where the status table goes beside ``out``: results.parquet -> results.status.parquet."""
    out = Path(out)
    return out.with_name(f"{out.stem}.status{out.suffix}")


def write_table(frame: pd.DataFrame, path: str | Path) -> None:
    """Parquet for .parquet/.pq, CSV for .csv (dates as YYYY-MM-DD); else ValueError."""
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix in (".parquet", ".pq"):
        frame.to_parquet(path, index=False)
    elif suffix == ".csv":
        frame.to_csv(path, index=False, date_format="%Y-%m-%d")
    else:
        raise ValueError(f"cannot tell the format of {str(path)!r}: name it .parquet or .csv")
