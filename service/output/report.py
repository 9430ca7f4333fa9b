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

from .plots import backtest_fan_png

__all__ = ["backtest_report"]


def _uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode()


def _png(fig: Any) -> str:
    import matplotlib.pyplot as plt

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    plt.close(fig)
    return _uri(buf.getvalue())


def _figures(result: BacktestResult, data: pd.DataFrame | None) -> list[tuple[str, str]]:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.ticker import MaxNLocator

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
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
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
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
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
    dated = data is not None and isinstance(data.index, pd.DatetimeIndex)
    for k in sorted({0, last // 2, last}):
        last_row = result.origins[k] - 1
        when = data.index[last_row].date().isoformat() if dated else f"row {last_row}"
        buf = io.BytesIO()
        backtest_fan_png(buf, result, k, history=data)
        caption = f"Fan chart: forecast from the data up to {when}"
        out.append((caption, _uri(buf.getvalue())))
    return out


def _table(frame: pd.DataFrame) -> str:
    return frame.to_html(float_format=lambda v: f"{v:.4g}", border=0, classes="scores")


def _section(heading: str, explanation: str, *tables: str) -> list[str]:
    """A heading, a paragraph saying what the numbers mean, and the tables (HTML)."""
    return [f"<h2>{html.escape(heading)}</h2>", f"<p>{html.escape(explanation)}</p>", *tables]


def _by_horizon(frame: pd.DataFrame, value: str) -> pd.DataFrame:
    """Models as rows, horizons as columns (mean over whatever else varies)."""
    return frame.pivot_table(index="model", columns="horizon", values=value, aggfunc="mean")


def _pinball_section(result: BacktestResult, scores: pd.DataFrame) -> list[str]:
    levels = ", ".join(f"{100 * q:g}%" for q in result.quantiles)
    return _section(
        "Pinball loss by model and horizon (mean over series)",
        f"The pinball (quantile) loss scores the forecast quantiles at {levels}: a miss "
        "costs its size, weighted by the side it falls on (an outcome above the 95% "
        "quantile costs 0.95 per unit, one below it only 0.05). The numbers average over "
        "those levels, the origins and the series, in the series' own units, so large "
        "series weigh more. Lower is better; compare models within a column.",
        _table(_by_horizon(scores, "pinball")))


def _log_score_section(result: BacktestResult) -> list[str]:
    heading = "Log score of all series jointly, by model and horizon (mean over origins)"
    explanation = ("The log score is the log of the probability density the forecast gave "
                   "to what actually happened, all series together. Higher (less negative) "
                   "is better: the forecast put more weight near the outcome. A difference "
                   "of 1 between two models means the better one gave the outcomes about "
                   "2.7 times the density (e^1), on average. Only the draw-based models "
                   "have one.")
    logs = result.log_scores()
    if not len(logs):
        return _section(heading, explanation,
                        "<p>Not available for these settings (exogenous regressors, "
                        "time-varying volatility or ragged data).</p>")
    return _section(heading, explanation, _table(_by_horizon(logs, "log_score")))


def _energy_section(result: BacktestResult) -> list[str]:
    return _section(
        "Energy score of all series jointly, by model and horizon (mean over origins)",
        "The energy score is the CRPS for several series at once: how far the forecast's "
        "joint draws lie from what happened, minus half their spread among themselves. "
        "Each series is first divided by the typical size of its one-period changes, so "
        "no series dominates. Lower is better.",
        _table(_by_horizon(result.energy_scores(), "energy")))


def _dm_cell(statistic: float, p_value: float) -> str:
    return f"{statistic:+.2f} (p={p_value:.3f}){' *' if p_value < 0.05 else ''}"


def _dm_section(result: BacktestResult) -> list[str]:
    heading = "Diebold-Mariano tests: the model against each benchmark (CRPS)"
    explanation = ("Is the model's CRPS different from a benchmark's by more than chance? "
                   "For each series and horizon the test compares the two forecasts' CRPS "
                   "origin by origin (with the Harvey-Leybourne-Newbold correction for "
                   "short samples). A negative statistic means the model's CRPS was lower "
                   "(better); a p-value below 0.05 (marked *) means the difference is "
                   "unlikely to be luck. With few origins the test rarely finds a clear "
                   "difference either way.")
    dm = result.dm_tests()
    if not len(dm):
        return _section(heading, explanation,
                        "<p>Not tested: each series and horizon needs at least 3 scored "
                        "origins.</p>")
    significant = dm["p_value"] < 0.05
    summary = pd.DataFrame({
        "model significantly better": (significant & (dm["statistic"] < 0)),
        "model significantly worse": (significant & (dm["statistic"] > 0)),
        "tested (series x horizons)": True,
    }).groupby(dm["benchmark"]).sum()
    cells = dm.assign(cell=[_dm_cell(s, p) for s, p in zip(dm["statistic"], dm["p_value"],
                                                           strict=True)])
    detail = cells.pivot(index=["benchmark", "series"], columns="horizon", values="cell")
    return _section(heading, explanation, _table(summary),
                    "<p>Each cell: statistic (p-value), by horizon.</p>",
                    _table(detail.fillna("-")))


def backtest_report(result: BacktestResult, *, title: str, settings: dict[str, Any],
                    data: pd.DataFrame | None = None) -> str:
    """The HTML page. ``data``: the backtested series (as given to
    :func:`priors.backtest.rolling_origin`), for the history and the dates of the fan
    charts (None: no history, periods counted from the origin)."""
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
    parts += [*_dm_section(result), *_pinball_section(result, scores),
              *_log_score_section(result), *_energy_section(result)]
    for caption, uri in _figures(result, data):
        parts += [f"<h2>{html.escape(caption)}</h2>", f"<img alt='{html.escape(caption)}' "
                  f"src='{uri}'>"]
    parts.append("</body></html>")
    return "\n".join(parts)
