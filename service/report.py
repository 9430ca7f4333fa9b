"""A self-contained HTML page of a backtest: score tables and plots (matplotlib, PNGs
embedded as data URIs, so the page needs no other files)."""

from __future__ import annotations

import base64
import html
import io
from typing import Any

import numpy as np
import pandas as pd

from priors.backtest import BacktestResult

__all__ = ["backtest_report"]


def _png(fig: Any) -> str:
    import matplotlib.pyplot as plt

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    plt.close(fig)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode()


def _figures(result: BacktestResult, dates: pd.DatetimeIndex | None) -> list[tuple[str, str]]:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    out: list[tuple[str, str]] = []
    scores = result.scores()
    base = "ols_var" if "ols_var" in result.models else "random_walk"

    fig, ax = plt.subplots(figsize=(7, 3.5))
    for model, rows in scores.groupby("model"):
        cov = rows.groupby("horizon")["coverage"].mean()
        ax.plot(cov.index, cov.to_numpy(), marker="o", label=model)
    ax.axhline(result.coverage, color="grey", linestyle="--", label="nominal")
    ax.set(xlabel="steps ahead", ylabel="share of outcomes inside the interval",
           title=f"Coverage of the central {100 * result.coverage:g}% interval")
    ax.legend(fontsize=8)
    out.append(("Coverage by horizon", _png(fig)))

    if base in result.models:
        rel = result.relative(base, "crps")
        fig, ax = plt.subplots(figsize=(7, 3.5))
        for model in [m for m in rel.columns if m != base]:
            by_h = rel[model].groupby(level="horizon").mean()
            ax.plot(by_h.index, by_h.to_numpy(), marker="o", label=model)
        ax.axhline(1.0, color="grey", linestyle="--")
        ax.set(xlabel="steps ahead", ylabel=f"CRPS / CRPS of {base}",
               title="Relative CRPS by horizon (below 1: better than the benchmark)")
        ax.legend(fontsize=8)
        out.append(("Relative CRPS by horizon", _png(fig)))

    if "model" in result.pit:
        pit = result.pit["model"][:, 0, :].ravel()
        pit = pit[~np.isnan(pit)]
        fig, ax = plt.subplots(figsize=(7, 3.5))
        ax.hist(pit, bins=10, range=(0, 1), density=True, color="#4a7ab5", edgecolor="white")
        ax.axhline(1.0, color="grey", linestyle="--")
        ax.set(xlabel="PIT value", ylabel="density",
               title="PIT of one-step forecasts (flat when calibrated)")
        out.append(("PIT histogram", _png(fig)))

    last = len(result.origins) - 1
    for k in sorted({0, last // 2, last}):
        fig, axes = plt.subplots(1, len(result.names), figsize=(3.2 * len(result.names), 3),
                                 squeeze=False)
        for j, name in enumerate(result.names):
            ax = axes[0, j]
            steps = np.arange(1, result.horizon + 1)
            ax.fill_between(steps, result.lower["model"][k, :, j], result.upper["model"][k, :, j],
                            alpha=0.3, label=f"{100 * result.coverage:g}% band")
            ax.plot(steps, result.median["model"][k, :, j], label="median")
            ax.plot(steps, result.actual[k, :, j], "k.", label="outcome")
            ax.set(title=name, xlabel="steps ahead")
            if j == 0:
                ax.set_ylabel("units")
                ax.legend(fontsize=7)
        last_row = result.origins[k] - 1
        when = dates[last_row].date().isoformat() if dates is not None else f"row {last_row}"
        fig.suptitle(f"Forecast from the data up to {when}", y=1.06)
        out.append((f"Fan chart: forecast from the data up to {when}", _png(fig)))
    return out


def _table(frame: pd.DataFrame) -> str:
    return frame.to_html(float_format=lambda v: f"{v:.4g}", border=0, classes="scores")


def backtest_report(result: BacktestResult, *, title: str, settings: dict[str, Any],
                    dates: pd.DatetimeIndex | None = None) -> str:
    """The HTML page."""
    scores = result.scores()
    by_h = scores.groupby(["model", "horizon"])[["rmse", "mae", "crps", "coverage"]].mean()
    parts = [
        "<!doctype html><html><head><meta charset='utf-8'>",
        f"<title>{html.escape(title)}</title>",
        "<style>body{font-family:sans-serif;max-width:1100px;margin:2em auto;color:#222}"
        "table.scores{border-collapse:collapse;font-size:13px}"
        "table.scores td,table.scores th{padding:2px 8px;text-align:right}"
        "img{max-width:100%}</style></head><body>",
        f"<h1>{html.escape(title)}</h1>",
        "<p>Each origin: the model is fitted again on the data before it (its tuning "
        "included) and forecasts the next steps; the scores compare those forecasts with "
        "what happened. Past accuracy is no guarantee: review forecasts before committing "
        "purchases.</p>",
        "<h2>Settings</h2><ul>" + "".join(
            f"<li>{html.escape(str(k))}: {html.escape(str(v))}</li>"
            for k, v in settings.items()) + "</ul>",
        "<h2>Scores by model and horizon (mean over series)</h2>", _table(by_h),
    ]
    base = "ols_var" if "ols_var" in result.models else "random_walk"
    if base in result.models:
        rel = result.relative(base, "crps").groupby(level="series").mean()
        parts += [f"<h2>CRPS relative to {base}, by series (mean over horizons)</h2>",
                  _table(rel)]
    for caption, uri in _figures(result, dates):
        parts += [f"<h2>{html.escape(caption)}</h2>", f"<img alt='{html.escape(caption)}' "
                  f"src='{uri}'>"]
    parts.append("</body></html>")
    return "\n".join(parts)
