"""Fan charts in one visual language, wherever Fanfold draws them.

Used by the API's ``fan-chart.svg`` / ``fan-chart.png``, by ``fanfold forecast --plot``
(through :mod:`service.output.plots`) and by the backtest report's fan charts; the planner page
(``service/static/app/js/charts.js``) draws with the same colours, and a test keeps the
two lists equal. The language: dates on the x axis, the series' units on the y axis,
history in near-black, nested central bands in one hue at three lightnesses (widest
lightest; colour-blind safe, since they differ in lightness, not hue), the median in the
darkest shade, and the forecast origin as a dashed grey line. Every element is labelled
in the legend.

Figures are built with :class:`matplotlib.figure.Figure` (no pyplot), so several
requests can draw at once without sharing state.
"""

from __future__ import annotations

import io
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

__all__ = [
    "BAND_SHADES",
    "HISTORY_COLOUR",
    "MEDIAN_COLOUR",
    "ORIGIN_COLOUR",
    "FanPanel",
    "band_colours",
    "draw_fan",
    "fan_figure",
    "figure_legend",
    "media_type",
    "figure_bytes",
    "panels_from_chart",
]

#: light to dark, ColorBrewer "Blues" (one hue; readable for every colour vision)
BAND_SHADES = ("#c6dbef", "#6baed6", "#3182bd")
MEDIAN_COLOUR = "#08306b"
HISTORY_COLOUR = "#252525"
ORIGIN_COLOUR = "#737373"
_FORMATS = {"png": "image/png", "svg": "image/svg+xml"}


def band_colours(coverages: Sequence[float]) -> dict[float, str]:
    """A shade per coverage, widest band lightest: for three bands exactly
    :data:`BAND_SHADES`; fewer take the shades from the light end outwards; more are
    interpolated in lightness between the end shades."""
    ordered = sorted(coverages, reverse=True)
    k = len(ordered)
    if k <= len(BAND_SHADES):
        picks = {1: BAND_SHADES[1:2], 2: BAND_SHADES[::2], 3: BAND_SHADES}[k] if k else ()
        return dict(zip(ordered, picks, strict=True))
    lo, hi = (np.array([int(s[i:i + 2], 16) for i in (1, 3, 5)], dtype=float)
              for s in (BAND_SHADES[0], BAND_SHADES[-1]))
    out = {}
    for i, cov in enumerate(ordered):
        rgb = lo + (hi - lo) * i / (k - 1)
        out[cov] = "#" + "".join(f"{round(v):02x}" for v in rgb)
    return out


@dataclass(frozen=True)
class FanPanel:
    """One series' fan: ``x`` (dates or steps) with the median and ``bands``
    (coverage in percent -> (lower, upper)), optionally after its history."""

    name: str
    x: np.ndarray
    median: np.ndarray
    bands: Mapping[float, tuple[np.ndarray, np.ndarray]]
    history_x: np.ndarray | None = None
    history: np.ndarray | None = None
    unit: str = "units"


def _is_dates(x: np.ndarray) -> bool:
    return np.issubdtype(x.dtype, np.datetime64)


def _dates_axis(ax: Any) -> None:
    import matplotlib.dates as mdates

    locator = mdates.AutoDateLocator(minticks=3, maxticks=7)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))


def draw_fan(ax: Any, panel: FanPanel) -> None:
    """History, the forecast origin, nested bands (widest lightest) and the median."""
    if panel.history is not None and panel.history_x is not None and len(panel.history):
        ax.plot(panel.history_x, panel.history, color=HISTORY_COLOUR, lw=1.1, label="history")
        ax.axvline(panel.history_x[-1], color=ORIGIN_COLOUR, ls="--", lw=1,
                   label="forecast origin")
    colours = band_colours(list(panel.bands))
    for cov in sorted(panel.bands, reverse=True):
        lower, upper = panel.bands[cov]
        ax.fill_between(panel.x, lower, upper, color=colours[cov], lw=0,
                        label=f"{cov:g}% band")
    ax.plot(panel.x, panel.median, color=MEDIAN_COLOUR, lw=1.6, label="median")
    ax.set_ylabel(f"{panel.name} ({panel.unit})")
    ax.grid(True, color="#e0e0e0", lw=0.6)
    ax.set_axisbelow(True)
    if _is_dates(panel.x):
        _dates_axis(ax)
    else:
        ax.set_xlabel("step")


def figure_legend(fig: Any, axes: Sequence[Any], *, max_cols: int = 6) -> None:
    """One legend below the panels with every label used in any of them, once, in rows
    of at most ``max_cols`` entries."""
    entries: dict[str, Any] = {}
    for ax in axes:
        for handle, label in zip(*ax.get_legend_handles_labels(), strict=True):
            entries.setdefault(label, handle)
    fig.legend(list(entries.values()), list(entries), loc="outside lower center",
               ncols=min(len(entries), max_cols), fontsize=8, frameon=False)


def fan_figure(panels: Sequence[FanPanel], *, title: str, cols: int = 2,
               width: float = 5.6, height: float = 3.0) -> Any:
    """A figure with one fan per panel in rows of ``cols`` and one legend below."""
    from matplotlib.figure import Figure

    cols = max(1, min(cols, len(panels)))
    rows = math.ceil(len(panels) / cols)
    fig = Figure(figsize=(width * cols, height * rows + 0.6), layout="constrained")
    grid = fig.subplots(rows, cols, squeeze=False)
    flat = list(grid.ravel())
    for ax in flat[len(panels):]:
        ax.remove()
    axes = flat[:len(panels)]
    for ax, panel in zip(axes, panels, strict=True):
        draw_fan(ax, panel)
        ax.set_title(panel.name)
    figure_legend(fig, axes)
    fig.suptitle(title)
    return fig


def figure_bytes(fig: Any, fmt: Literal["png", "svg"]) -> bytes:
    """The figure as PNG (110 dpi) or SVG bytes; the SVG carries no creation date."""
    buf = io.BytesIO()
    metadata = {"Date": None} if fmt == "svg" else None
    fig.savefig(buf, format=fmt, dpi=110, metadata=metadata)
    return buf.getvalue()


def media_type(fmt: str) -> str:
    return _FORMATS[fmt]


def _x(dates: Sequence[str]) -> np.ndarray:
    """ISO dates as datetime64, else the labels' integers (steps, or rows before 0)."""
    try:
        return np.array(dates, dtype="datetime64[D]")
    except ValueError:
        return np.array([int(d) for d in dates])


def panels_from_chart(chart: Mapping[str, Any], series: Sequence[str] | None = None
                      ) -> list[FanPanel]:
    """Panels from the fan-chart answer of :func:`service.compute.engine.fan_chart` (the JSON
    of ``GET /v1/models/{id}/fan-chart``), for ``series`` (default: all, in order)."""
    names = list(chart["median"]) if series is None else list(series)
    x = _x(chart["dates"])
    history = chart["history"]
    hx = _x(history["dates"]) if history["dates"] else None
    if hx is not None and not _is_dates(hx):
        hx = None if _is_dates(x) else hx
    return [FanPanel(
        name=name, x=x, median=_values(chart["median"][name]),
        bands={float(cov): (_values(by[name]["lower"]), _values(by[name]["upper"]))
               for cov, by in chart["bands"].items()},
        history_x=hx,
        history=None if hx is None else _values(history["values"][name]),
    ) for name in names]


def _values(items: Sequence[float | None]) -> np.ndarray:
    """JSON numbers (null for a value that was not finite) as float64 with NaN."""
    return np.array([np.nan if v is None else v for v in items], dtype=np.float64)
