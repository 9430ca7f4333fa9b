"""Summaries of simulated forecast paths: mean, median, quantiles, fan-chart bands.

All functions take paths of shape (S, h, n) already in the user's units. Quantiles use
numpy's default (linear interpolation between order statistics, "type 7"), which is
monotone in the level, so bands built from them are nested.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ._kernels import select_quantiles
from ._types import FloatArray
from .errors import SpecificationError

__all__ = ["Forecast", "band_levels", "check_quantiles", "fan_bands"]


def draw_quantiles(paths: FloatArray, levels: FloatArray) -> FloatArray:
    """np.quantile over the draws axis of (S, ...) paths, as (len(levels), ...).

    Same values as ``np.quantile(paths, levels, axis=0)`` (type 7, bit for bit), by the
    compiled selection :func:`priors._kernels.select_quantiles`, about 3x faster.
    """
    paths = np.asarray(paths, dtype=np.float64)
    levels = np.asarray(levels, dtype=np.float64)
    rest = paths.shape[1:]
    rows = np.ascontiguousarray(np.moveaxis(paths, 0, -1).reshape(-1, paths.shape[0]))
    flat = levels.ravel()
    order = np.argsort(flat, kind="stable")  # the kernel walks the levels upwards
    values = np.empty((flat.size, rows.shape[0]))
    values[order] = select_quantiles(rows, flat[order])
    return values.reshape(levels.shape + rest)


def check_quantiles(levels: Sequence[float]) -> FloatArray:
    """Validate quantile levels: each strictly inside (0, 1), sorted, no repeats."""
    q = np.asarray(list(levels), dtype=np.float64)
    if q.ndim != 1 or q.size == 0:
        raise SpecificationError("give at least one quantile level")
    if not np.all((q > 0) & (q < 1)):
        raise SpecificationError(f"quantile levels must lie strictly between 0 and 1; got {q}")
    if np.any(np.diff(q) <= 0):
        raise SpecificationError(f"quantile levels must be increasing with no repeats; got {q}")
    return q


def band_levels(coverages: Sequence[float]) -> FloatArray:
    """Central-interval coverages in percent (e.g. 50, 80, 95) -> sorted fractions."""
    c = np.asarray(list(coverages), dtype=np.float64)
    if c.size == 0 or not np.all((c > 0) & (c < 100)):
        raise SpecificationError(f"band coverages must lie strictly between 0 and 100; got {c}")
    return np.unique(c) / 100.0


def fan_bands(paths: FloatArray, coverages: Sequence[float]) -> dict[float, FloatArray]:
    """Central intervals of each coverage: {coverage%: array (2, h, n) of lower, upper}.

    Wider coverages contain narrower ones at every step (nested fan).
    """
    pct = np.unique(np.asarray(list(coverages), dtype=np.float64))
    fracs = band_levels(pct)
    lows = (1.0 - fracs) / 2.0
    levels = np.concatenate([lows, 1.0 - lows])
    qs = draw_quantiles(paths, levels)
    m = fracs.size
    # keys are the coverages as given: 100 * (29 / 100) is 28.999999999999996
    return {float(c): np.stack([qs[i], qs[m + i]]) for i, c in enumerate(pct)}


@dataclass(frozen=True)
class Forecast:
    """Simulated predictive paths in the user's units.

    paths : (S, h, n).  names : n series names.  dates : h future dates (None for plain
    arrays; then steps are numbered 1..h).  rejected_share : share of explosive
    parameter draws rejected (None if no screening was asked for).
    """

    paths: FloatArray
    names: tuple[str, ...]
    dates: pd.DatetimeIndex | None
    rejected_share: float | None = None

    @property
    def horizon(self) -> int:
        return self.paths.shape[1]

    def mean(self) -> FloatArray:
        """(h, n) predictive mean."""
        return self.paths.mean(axis=0)

    def median(self) -> FloatArray:
        """(h, n) predictive median."""
        return draw_quantiles(self.paths, np.array([0.5]))[0]

    def quantiles(self, levels: Sequence[float]) -> FloatArray:
        """(len(levels), h, n) predictive quantiles."""
        return draw_quantiles(self.paths, check_quantiles(levels))

    def bands(self, coverages: Sequence[float] = (50, 80, 95)) -> dict[float, FloatArray]:
        """Nested central intervals, see :func:`fan_bands`."""
        return fan_bands(self.paths, coverages)

    def cumulative(self) -> Forecast:
        """Forecast of running totals over steps 1..h, path by path."""
        return Forecast(np.cumsum(self.paths, axis=1), self.names, self.dates,
                        self.rejected_share)

    def steps(self) -> list[str]:
        """Labels of the steps: ISO dates, or '1'..'h'."""
        if self.dates is None:
            return [str(i) for i in range(1, self.horizon + 1)]
        return np.datetime_as_string(self.dates.to_numpy(), unit="D").tolist()

    def to_frame(self, levels: Sequence[float] = (0.05, 0.5, 0.95)) -> pd.DataFrame:
        """Tidy table: one row per series and step with mean, median and quantiles (the
        0.5 level is the median column, not a second column with the same numbers)."""
        q = check_quantiles(levels)
        q = q[q != 0.5]
        qs = self.quantiles(q)
        mean, med = self.mean(), self.median()
        steps = self.steps()
        rows = []
        for j, name in enumerate(self.names):
            for h in range(self.horizon):
                row: dict[str, object] = {"series": name, "date": steps[h], "step": h + 1,
                                          "mean": mean[h, j], "median": med[h, j]}
                for i, lv in enumerate(q):
                    row[f"q{lv:g}"] = qs[i, h, j]
                rows.append(row)
        return pd.DataFrame(rows)
