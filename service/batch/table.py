"""The batch's input: one long table (date, group keys, series, value) -> groups.

Each row is one value: the date, the labels of its group (one column per key, e.g.
warehouse and family), the series within the group (e.g. the part) and the value.
:func:`split_groups` checks the table once, naming the column of every problem
(:class:`TableError`), and returns each group as plain arrays for the workers
(:class:`~service.batch.worker.GroupArrays`): a (T, n) float64 array on the group's own
dates, one column per series (sorted by name), NaN where a value is missing. A problem
that belongs to one group only (the same series and date twice) fails that group and
not the batch.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pandas as pd

from priors import DataError

from .worker import GroupArrays, GroupForecast, failed

__all__ = ["Columns", "Groups", "TableError", "parse_group_by", "read_table", "split_groups"]


class TableError(DataError):
    """The long table cannot be used; ``column`` names the column at fault."""

    def __init__(self, message: str, column: str) -> None:
        super().__init__(message)
        self.column = column


class Columns(NamedTuple):
    """Which column holds what."""

    group_by: tuple[str, ...]
    date: str = "date"
    series: str = "series"
    value: str = "value"


class Groups(NamedTuple):
    """The groups to forecast, sorted by key, and those refused before any work (each
    key once in all)."""

    groups: list[GroupArrays]
    rejected: list[GroupForecast]

    @property
    def keys(self) -> list[tuple[str, ...]]:
        return sorted([g.key for g in self.groups] + [r.key for r in self.rejected])


def read_table(path: str | Path) -> pd.DataFrame:
    """The table in a CSV or Parquet file (by its suffix: .parquet or .pq, else CSV)."""
    path = Path(path)
    if path.suffix.lower() in (".parquet", ".pq"):
        return pd.read_parquet(path)
    return pd.read_csv(path, encoding="utf-8-sig", dtype_backend="numpy_nullable")


def _check_columns(frame: pd.DataFrame, columns: Columns) -> None:
    if not columns.group_by:
        raise TableError("give at least one group column (--group-by)", "group_by")
    roles = {columns.date: "date", columns.series: "series", columns.value: "value"}
    for name in columns.group_by:
        if name in roles:
            raise TableError(f"column {name!r} is the {roles[name]} column; it cannot also "
                             "be a group column", name)
    if len(set(columns.group_by)) < len(columns.group_by):
        raise TableError("a group column is named twice", "group_by")
    have = [str(c) for c in frame.columns]
    for name in (*columns.group_by, columns.date, columns.series, columns.value):
        if name not in have:
            raise TableError(f"the table has no column {name!r}; its columns are "
                             f"{', '.join(map(repr, have))}", name)
    if not len(frame):
        raise TableError("the table has no rows", columns.value)


def _first_bad(bad: np.ndarray, raw: pd.Series) -> str:
    i = int(np.flatnonzero(bad)[0])
    return f"row {i + 1} ({raw.iloc[i]!r})"


def _labels(frame: pd.DataFrame, name: str) -> np.ndarray:
    raw = frame[name]
    missing = raw.isna().to_numpy()
    if missing.any():
        raise TableError(f"column {name!r} is empty in {_first_bad(missing, raw)}; every row "
                         "needs its group and series labels", name)
    return raw.astype(str).str.strip().to_numpy(dtype=object)


def _dates(frame: pd.DataFrame, name: str) -> np.ndarray:
    raw = frame[name]
    parsed = pd.to_datetime(raw, errors="coerce") if not pd.api.types.is_datetime64_any_dtype(
        raw) else raw
    bad = parsed.isna().to_numpy()
    if bad.any():
        raise TableError(f"column {name!r}: cannot read {_first_bad(bad, raw)} as a date",
                         name)
    if getattr(parsed.dt, "tz", None) is not None:
        parsed = parsed.dt.tz_localize(None)
    return parsed.to_numpy(dtype="datetime64[ns]")


def _values(frame: pd.DataFrame, name: str) -> np.ndarray:
    raw = frame[name]
    if pd.api.types.is_bool_dtype(raw):
        raise TableError(f"column {name!r} holds true/false, not numbers", name)
    values = pd.to_numeric(raw, errors="coerce").astype("Float64")
    bad = (values.isna() & raw.notna()).to_numpy()
    if bad.any():
        raise TableError(f"column {name!r}: {_first_bad(bad, raw)} is not a number; leave "
                         "a missing value empty", name)
    return values.to_numpy(dtype=np.float64, na_value=np.nan)


def _one_group(key: tuple[str, ...], dates: np.ndarray, series: np.ndarray,
               values: np.ndarray) -> GroupArrays | GroupForecast:
    """The (T, n) array of one group's rows, or its failure (a series and date twice)."""
    days, row = np.unique(dates, return_inverse=True)
    names, col = np.unique(series.astype(str), return_inverse=True)
    cell = row * len(names) + col
    counts = np.bincount(cell, minlength=len(days) * len(names))
    table = np.full((len(days), len(names)), np.nan)
    table[row, col] = values
    group = GroupArrays(key, days, tuple(str(n) for n in names), table)
    if (counts > 1).any():
        where = int(np.flatnonzero(counts > 1)[0])
        day = np.datetime_as_string(days[where // len(names)], unit="D")
        return failed(group, "DuplicateRowsError",
                      f"series {str(names[where % len(names)])!r} has {counts[where]} rows "
                      f"for {day}; give one value per series and date")
    return group


def split_groups(frame: pd.DataFrame, columns: Columns) -> Groups:
    """Check the long table and cut it into groups (sorted by key).

    Raises :class:`TableError` (naming the column) for a missing column, an empty
    label, a date or value that cannot be read.
    """
    _check_columns(frame, columns)
    keys = [_labels(frame, name) for name in columns.group_by]
    series = _labels(frame, columns.series)
    dates = _dates(frame, columns.date)
    values = _values(frame, columns.value)
    order = np.lexsort((dates, series, *reversed(keys)))
    keys = [k[order] for k in keys]
    series, dates, values = series[order], dates[order], values[order]
    # a new group starts wherever any key changes
    change = np.zeros(len(order), dtype=bool)
    change[0] = True
    for k in keys:
        change[1:] |= k[1:] != k[:-1]
    starts = np.flatnonzero(change)
    ends = np.append(starts[1:], len(order))
    groups: list[GroupArrays] = []
    rejected: list[GroupForecast] = []
    for a, b in zip(starts, ends, strict=True):
        key = tuple(str(k[a]) for k in keys)
        one = _one_group(key, dates[a:b], series[a:b], values[a:b])
        (groups if isinstance(one, GroupArrays) else rejected).append(one)
    return Groups(groups, rejected)


def parse_group_by(text: str | Sequence[str]) -> tuple[str, ...]:
    """``"warehouse,family"`` -> ("warehouse", "family")."""
    items = text.split(",") if isinstance(text, str) else list(text)
    return tuple(s.strip() for s in items if s.strip())
