"""PNG charts for the command line: fan charts, scenarios, shock responses and the
forecasts of a backtest.

matplotlib is imported inside the functions with the Agg backend (no display needed),
as in :mod:`service.output.report`. Each function writes one PNG to ``path`` (a file name, or a
binary file object such as ``io.BytesIO``) and returns the figure, already closed (its
axes stay readable, e.g. for tests). Values are in the series' own units; ``OSError``
from an unwritable path is left to the caller.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any, BinaryIO

import numpy as np
import pandas as pd

from priors import Forecast
from priors.calendar import calendar_from_index
from priors.propagation import ShockResponses
from priors.scenarios import Scenario

from .charts import (
    BAND_SHADES,
    HISTORY_COLOUR,
    MEDIAN_COLOUR,
    ORIGIN_COLOUR,
    FanPanel,
    band_colours,
    draw_fan,
    fan_figure,
    figure_legend,
)

if TYPE_CHECKING:
    from priors.backtest import BacktestResult

__all__ = ["backtest_fan_png", "fan_chart_png", "period_name", "responses_png", "scenario_png"]

_PERIODS = {"monthly": "months", "quarterly": "quarters", "weekly": "weeks", "daily": "days"}


def period_name(kind: str) -> str:
    """Plural name of a period for a calendar kind: "monthly" -> "months" (else
    "periods")."""
    return _PERIODS.get(kind, "periods")


def _pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _grid(plt: Any, panels: int, *, cols: int, width: float, height: float
          ) -> tuple[Any, list[Any]]:
    """A figure with ``panels`` axes in rows of ``cols``; unused cells removed."""
    cols = max(1, min(cols, panels))
    rows = math.ceil(panels / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(width * cols, height * rows),
                             squeeze=False, layout="constrained")
    flat = list(axes.ravel())
    for ax in flat[panels:]:
        ax.remove()
    return fig, flat[:panels]


def _save(fig: Any, plt: Any, path: str | BinaryIO) -> Any:
    try:
        fig.savefig(path, format="png", dpi=110)
    finally:
        plt.close(fig)
    return fig


def _x(forecast: Forecast) -> np.ndarray:
    """Forecast x values: dates, or steps 1..h for data without dates."""
    if forecast.dates is None:
        return np.arange(1, forecast.horizon + 1)
    return forecast.dates.to_numpy()


def _history_x(history: pd.DataFrame) -> np.ndarray:
    if isinstance(history.index, pd.DatetimeIndex):
        return history.index.to_numpy()
    return np.arange(-len(history) + 1, 1)  # plain rows: 0 is the last observation


def _panel(x: np.ndarray, forecast: Forecast, j: int, bands: Sequence[float],
           history: pd.DataFrame | None, name: str) -> FanPanel:
    """Series ``j`` of ``forecast`` as a :class:`service.output.charts.FanPanel`."""
    band = forecast.bands(bands)
    shown = history is not None and name in history.columns and len(history)
    return FanPanel(
        name=name, x=x, median=forecast.median()[:, j],
        bands={cov: (b[0, :, j], b[1, :, j]) for cov, b in band.items()},
        history_x=_history_x(history) if shown and history is not None else None,
        history=history[name].to_numpy(dtype=np.float64)
        if shown and history is not None else None)


def _fan(ax: Any, x: np.ndarray, forecast: Forecast, j: int, bands: Sequence[float],
         history: pd.DataFrame | None, name: str) -> None:
    """History, the forecast origin, nested bands (widest lightest) and the median of
    series ``j``, in the look of :mod:`service.output.charts`."""
    draw_fan(ax, _panel(x, forecast, j, bands, history, name))


def fan_chart_png(path: str | BinaryIO, history: pd.DataFrame | None, forecast: Forecast, *,
                  bands: Sequence[float] = (50, 80, 95), title: str | None = None) -> Any:
    """One panel per series: the recent history, the forecast origin, nested central
    bands and the median (:func:`service.output.charts.fan_figure`, as the API's fan-chart.png).

    ``history`` (dates x series, the series' own units; e.g. the last 36 periods) may be
    None, e.g. for running totals that have no past counterpart.
    """
    x = _x(forecast)
    panels = [_panel(x, forecast, j, bands, history, name)
              for j, name in enumerate(forecast.names)]
    fig = fan_figure(panels, title=title or "Forecast: median and central bands")
    fig.savefig(path, format="png", dpi=110)
    return fig


def scenario_png(path: str, history: pd.DataFrame | None, scenario: Scenario, *,
                 bands: Sequence[float] = (50, 80, 95)) -> Any:
    """The conditional forecast as a fan chart per series, with the baseline median
    (dashed), fixed values (dots) and ranges (bars; arrows for one-sided ranges).

    Every series is shown, since conditions on one move the others; the titles of the
    conditioned series say so.
    """
    plt = _pyplot()
    fc, base = scenario.forecast, scenario.baseline
    fig, axes = _grid(plt, len(fc.names), cols=2, width=5.6, height=3.0)
    x = _x(fc)
    table = scenario.table()
    base_median = base.median()
    for j, (ax, name) in enumerate(zip(axes, fc.names, strict=True)):
        _fan(ax, x, fc, j, bands, history, name)
        ax.plot(x, base_median[:, j], color="#555555", lw=1.2, ls="--",
                label="baseline median")
        rows = table[table["series"] == name]
        for kind, marker, label in (("value", "o", "fixed value"), ("known", "s", "known")):
            fixed = rows[rows["kind"] == kind]
            if len(fixed):
                ax.plot(x[fixed["step"].to_numpy() - 1], fixed["lower"].to_numpy(),
                        ls="none", marker=marker, ms=5, color="#c0392b", label=label)
        ranges = rows[rows["kind"] == "range"]
        for r in ranges.itertuples():
            lower = -math.inf if pd.isna(r.lower) else float(r.lower)
            upper = math.inf if pd.isna(r.upper) else float(r.upper)
            _range(ax, x[int(r.step) - 1], lower, upper)
        ax.set_title(f"{name} (conditioned)" if len(rows) else name,
                     fontweight="bold" if len(rows) else "normal")
    figure_legend(fig, max_cols=4, axes=axes)
    fig.suptitle("Scenario: conditional forecast (bands, median) and baseline (dashed)")
    return _save(fig, plt, path)


def _range(ax: Any, x: Any, lower: float, upper: float) -> None:
    color = "#d35400"
    if math.isfinite(lower) and math.isfinite(upper):
        mid, half = (lower + upper) / 2, (upper - lower) / 2
        ax.errorbar([x], [mid], yerr=[[half], [half]], fmt="none", ecolor=color, elinewidth=2,
                    capsize=4, label="range")
    elif math.isfinite(lower):
        ax.plot([x], [lower], ls="none", marker="^", ms=7, color=color, label="at least")
    else:
        ax.plot([x], [upper], ls="none", marker="v", ms=7, color=color, label="at most")


def responses_png(path: str, responses: ShockResponses, *, shocks: Sequence[str] | None = None,
                  coverages: Sequence[float] = (68, 90), period_name: str = "months") -> Any:
    """Impulse responses: one row per responding series, one column per shock, with the
    pointwise median, central bands and the zero line; y axes in each series' unit."""
    names = list(responses.names)
    chosen = names if shocks is None else list(shocks)
    unknown = [s for s in chosen if s not in names]
    if unknown:
        raise ValueError(f"unknown shock {unknown[0]!r}; series are {', '.join(names)}")
    plt = _pyplot()
    rows, cols = len(names), len(chosen)
    fig, axes = plt.subplots(rows, cols, figsize=(3.4 * cols, 2.3 * rows), squeeze=False,
                             sharex=True, layout="constrained")
    steps = np.arange(responses.steps)
    med, band = responses.median(), responses.bands(coverages)
    shades = band_colours(list(band))
    for c, shock in enumerate(chosen):
        j = names.index(shock)
        for r, resp in enumerate(names):
            ax = axes[r, c]
            for cov in sorted(band, reverse=True):
                ax.fill_between(steps, band[cov][0, :, r, j], band[cov][1, :, r, j],
                                color=shades[cov], lw=0,
                                label=f"{cov:g}% band")
            ax.plot(steps, med[:, r, j], color=MEDIAN_COLOUR, lw=1.5, label="median")
            ax.axhline(0.0, color="grey", lw=0.8)
            ax.set_title(f"shock: {shock} -> {resp}", fontsize=8)
            ax.tick_params(labelsize=7)
            if c == 0:
                ax.set_ylabel(f"{resp} ({responses.units[r]})", fontsize=8)
            if r == rows - 1:
                ax.set_xlabel(f"{period_name} after the shock", fontsize=8)
    figure_legend(fig, max_cols=4, axes=[axes[0, 0]])
    size = "one-s.d." if responses.shock_size == "sd" else "unit"
    total = ", summed over steps" if responses.cumulative else ""
    fig.suptitle(f"Responses to a {size} shock ({responses.identification}{total})")
    return _save(fig, plt, path)


#: date tick labels by calendar kind (ISO-like, so they read as dates in any locale)
_DATE_FORMATS = {"monthly": "%Y-%m", "quarterly": "%Y-%m"}


def _origin_x(result: BacktestResult, k: int, history: pd.DataFrame | None,
              past: int) -> tuple[np.ndarray, np.ndarray, str | None]:
    """x values of the last ``past`` rows before origin ``k`` and of its ``horizon``
    forecast steps: dates (the rows' own, then the calendar's next ones) with the date
    format for the ticks, or periods counted from the origin (0: its last row) and None."""
    o = result.origins[k]
    shown = 0 if history is None else min(past, o)
    if history is None or not isinstance(history.index, pd.DatetimeIndex):
        return np.arange(1 - shown, 1), np.arange(1, result.horizon + 1), None
    calendar = calendar_from_index(history.index[:o])
    future = calendar.future(result.horizon)
    assert future is not None  # a calendar with dates
    return (history.index[o - shown:o].to_numpy(), future.to_numpy(),
            _DATE_FORMATS.get(calendar.kind, "%Y-%m-%d"))


def _origin_ticks(ax: Any, past_x: np.ndarray, future_x: np.ndarray, fmt: str | None) -> None:
    """At most about 6 ticks on the x axis: rows' dates (one of them the origin's) in
    ``fmt``, or whole periods when ``fmt`` is None."""
    from matplotlib.ticker import MaxNLocator

    if fmt is None:
        ax.xaxis.set_major_locator(MaxNLocator(nbins=6, integer=True))
        ax.set_xlabel("periods after the forecast origin")
        return
    import matplotlib.dates as mdates
    from matplotlib.ticker import FixedLocator

    every = max(1, math.ceil((len(past_x) + len(future_x)) / 6))
    both = np.concatenate([past_x, future_x])
    origin = len(past_x) - 1  # the origin's own date is always a tick
    picks = sorted({*range(origin, -1, -every), *range(max(origin, 0), len(both), every)})
    ax.xaxis.set_major_locator(FixedLocator(mdates.date2num(both[picks])))
    ax.xaxis.set_major_formatter(mdates.DateFormatter(fmt))
    ax.tick_params(axis="x", labelrotation=45, labelsize=7)


def backtest_fan_png(path: str | BinaryIO, result: BacktestResult, k: int, *,
                     history: pd.DataFrame | None = None,
                     units: Mapping[str, str] | None = None, past: int = 12) -> Any:
    """The forecast made at the ``k``-th origin of a backtest, one panel per series: the
    last ``past`` observations before the origin, the central band, the median and the
    outcomes, with the forecast origin (the last row the model saw) marked.

    ``history`` is the backtested data (rows x series, as given to
    :func:`priors.backtest.rolling_origin`); with a DatetimeIndex the x axis shows dates
    (the forecast steps at the calendar's dates after the origin), otherwise periods
    counted from the origin, in whole numbers. ``units`` maps series to their unit for
    the y axis labels (default "units": the data's own units).
    """
    if not 0 <= k < len(result.origins):
        raise ValueError(f"origin index k must be 0 to {len(result.origins) - 1}; got {k}")
    if past < 1:
        raise ValueError(f"past must be at least 1; got {past}")
    if history is not None and len(history) < result.origins[k]:
        raise ValueError(f"history has {len(history)} rows; the origin needs "
                         f"{result.origins[k]}")
    past_x, future_x, fmt = _origin_x(result, k, history, past)
    plt = _pyplot()
    fig, axes = _grid(plt, len(result.names), cols=3, width=3.8, height=2.9)
    band = f"central {100 * result.coverage:g}% interval"
    for j, (ax, name) in enumerate(zip(axes, result.names, strict=True)):
        if history is not None:
            before = history.iloc[result.origins[k] - len(past_x):result.origins[k]]
            ax.plot(past_x, before[name].to_numpy(dtype=np.float64), color=HISTORY_COLOUR,
                    lw=1.1,
                    label="data before the origin")
        ax.fill_between(future_x, result.lower["model"][k, :, j],
                        result.upper["model"][k, :, j], color=BAND_SHADES[1], lw=0,
                        label=band)
        ax.plot(future_x, result.median["model"][k, :, j], color=MEDIAN_COLOUR, lw=1.6,
                label="median forecast")
        ax.plot(future_x, result.actual[k, :, j], ls="none", marker="o", ms=3.5,
                color="black", label="what happened")
        ax.axvline(past_x[-1] if len(past_x) else 0, color=ORIGIN_COLOUR, ls="--", lw=1,
                   label="forecast origin")
        _origin_ticks(ax, past_x, future_x, fmt)
        ax.set_title(name)
        ax.set_ylabel(f"{name} ({(units or {}).get(name, 'units')})")
    figure_legend(fig, max_cols=4, axes=axes)
    return _save(fig, plt, path)
