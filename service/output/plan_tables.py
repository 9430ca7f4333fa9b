"""Plain text views of the planning answers built by :mod:`service.compute.planning`.

As in :mod:`service.output.tables`, each ``format_*`` function takes the JSON-ready dict (the
same one ``--json`` prints) and returns the text as one string.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from .tables import decimals_for, render_table

__all__ = ["FAR_FROM_EXPECTED", "format_reorder", "format_scenario", "format_shares",
           "format_shocks", "percent", "unlikely_conditions"]

_MISSING = "-"
#: Warning printed under the conditions when one of them is in the forecast's far tails.
FAR_FROM_EXPECTED = "the scenario is far from what the model expects"
_TAIL = 0.01  # a value below the 1st or above the 99th percentile, a range below 1%
CAUTION = ("Review before ordering: these are model estimates from past demand; they do not "
           "know about promotions, supply problems or price changes.")


def percent(p: float | None) -> str:
    """A probability as a percent with one decimal, never rounding to 0% or 100%."""
    if p is None or not math.isfinite(p):
        return _MISSING
    if 0 < p < 0.0005:
        return "<0.1%"
    if 0.9995 < p < 1:
        return ">99.9%"
    return f"{100 * p:.1f}%"


def _fixed(value: float | None, decimals: int) -> str:
    return _MISSING if value is None else f"{value:.{decimals}f}"


def _seed_line(what: str, payload: dict[str, Any]) -> str:
    seed = payload["seed"]
    return (f"{what}, {payload['draws']} draws, seed {seed} "
            f"(rerun with --seed {seed} to reproduce)")


# ---------------------------------------------------------------------- scenario
def unlikely_conditions(conditions: Sequence[dict[str, Any]]) -> list[str]:
    """Conditions in the unconditional forecast's far tails: a fixed value below its
    1st or above its 99th percentile, or a range met by under 1% of the draws."""
    out = []
    for c in conditions:
        p = c["prior_probability"]
        if p is None or c["kind"] == "known":
            continue
        if c["kind"] == "value" and not _TAIL <= p <= 1 - _TAIL:
            out.append(f"{c['series']} on {c['date']} (value at percentile {percent(p)})")
        elif c["kind"] == "range" and p < _TAIL:
            out.append(f"{c['series']} on {c['date']} (range met by {percent(p)} of draws)")
    return out


def _condition_cell(c: dict[str, Any], decimals: int) -> str:
    lo, hi = c["lower"], c["upper"]
    if c["kind"] in ("value", "known"):
        return f"= {_fixed(lo, decimals)}"
    if hi is None:
        return f">= {_fixed(lo, decimals)}"
    if lo is None:
        return f"<= {_fixed(hi, decimals)}"
    return f"{_fixed(lo, decimals)} to {_fixed(hi, decimals)}"


def format_scenario(payload: dict[str, Any], *, lags: int) -> str:
    """The conditions with their prior probabilities, then per series the conditional
    forecast beside the baseline median."""
    forecasts, baseline, conds = payload["forecasts"], payload["baseline"], payload["conditions"]
    out = [_seed_line(f"Fanfold scenario: {len(forecasts)} series, {payload['horizon']} steps "
                      f"ahead, VAR({lags})", payload)]
    if payload["known_periods"]:
        out.append(f"the first {payload['known_periods']} period(s) are incomplete data; their "
                   "known values are conditions of kind 'known'")
    dec = decimals_for(v for c in conds for v in (c["lower"], c["upper"]))
    rows = [[c["series"], c["date"], str(c["step"]), c["kind"], _fixed(c["lower"], dec),
             _fixed(c["upper"], dec), percent(c["prior_probability"])] for c in conds]
    out += ["", "conditions (prior: for a value, its percentile in the unconditional forecast; "
                "for a range, the share of unconditional draws inside it):",
            render_table(["series", "date", "step", "kind", "lower", "upper", "prior"], rows)]
    if any(c["kind"] == "range" for c in conds):
        out.append(f"all ranges held at once in {percent(payload['ranges_probability'])} of "
                   "the draws given the fixed values")
    unlikely = unlikely_conditions(conds)
    if any(c["kind"] == "range" for c in conds) and payload["ranges_probability"] < _TAIL:
        unlikely.append(f"all ranges at once (met by {percent(payload['ranges_probability'])} "
                        "of draws)")
    if unlikely:
        out.append(f"warning: {FAR_FROM_EXPECTED}: {'; '.join(unlikely)}")
    out += ["", "conditional forecast; baseline = median without the conditions, change = "
                "median - baseline"]
    for name, fc in forecasts.items():
        mine = {c["date"]: c for c in conds if c["series"] == name}
        base = baseline[name]["median"]
        columns = {"mean": fc["mean"], "median": fc["median"],
                   **{f"q{k}": v for k, v in fc["quantiles"].items()}, "baseline": base,
                   "change": [None if a is None or b is None else a - b
                              for a, b in zip(fc["median"], base, strict=True)]}
        dec = decimals_for(v for col in columns.values() for v in col)
        rows = [[date, *([_condition_cell(mine[date], dec) if date in mine else ""]
                         if mine else []),
                 *(_fixed(col[h], dec) for col in columns.values())]
                for h, date in enumerate(fc["dates"])]
        header = ["date", *(["condition"] if mine else []), *columns]
        out += ["", f"{name} (conditioned)" if mine else name, render_table(header, rows)]
    return "\n".join(out)


# ---------------------------------------------------------------------- shocks
def _band_cell(median: float | None, lower: float | None, upper: float | None,
               decimals: int) -> str:
    return (f"{_fixed(median, decimals)} [{_fixed(lower, decimals)}, "
            f"{_fixed(upper, decimals)}]")


def format_shocks(payload: dict[str, Any], *, period_name: str) -> str:
    """Per shock, the median response of every series at each step with the widest
    band."""
    size = "one-standard-deviation" if payload["shock_size"] == "sd" else "unit"
    order = payload["ordering"]
    how = payload["identification"] + (f", order {', '.join(order)}" if order else "")
    total = ", summed over steps" if payload["cumulative"] else ""
    widest = None
    out = [_seed_line(f"Fanfold shocks: responses to a {size} shock ({how}){total}", payload)]
    units = {k: u.removesuffix(", summed over steps") for k, u in payload["units"].items()}
    for shock, responses in payload["responses"].items():
        widest = max(next(iter(responses.values()))["bands"], key=float)
        columns = []
        for pw in responses.values():
            band = pw["bands"][widest]
            dec = decimals_for([*pw["median"], *band["lower"], *band["upper"]], digits=3)
            columns.append([_band_cell(m, lo, hi, dec) for m, lo, hi in
                            zip(pw["median"], band["lower"], band["upper"], strict=True)])
        rows = [[str(step), *(col[i] for col in columns)]
                for i, step in enumerate(payload["steps"])]
        header = ["step", *(f"{resp} ({units[resp]})" for resp in responses)]
        out += ["", f"shock: {shock}", render_table(header, rows)]
    if widest is not None:
        out.insert(1, f"step = {period_name} after the shock (0 = the period of the shock); "
                      f"cells: median response [{widest}% band]")
    return "\n".join(out)


def format_shares(payload: dict[str, Any], steps: Sequence[int]) -> str:
    """Median variance shares (percent) of each series at a few steps, by shock."""
    index = {s: i for i, s in enumerate(payload["steps"])}
    chosen = [s for s in dict.fromkeys(steps) if s in index]
    out = ["Variance shares: median % of each series' forecast error variance due to each "
           f"shock ({payload['identification']}), by steps ahead"]
    for series, by_shock in payload["shares"].items():
        rows = [[str(s), *(_fixed(None if pw["median"][index[s]] is None
                                  else 100 * pw["median"][index[s]], 1)
                           for pw in by_shock.values())] for s in chosen]
        out += ["", series, render_table(["steps", *by_shock], rows)]
    return "\n".join(out)


# ---------------------------------------------------------------------- reorder
def _target(item: dict[str, Any]) -> str:
    short = "service" if item["target"] == "service_level" else "fill rate"
    return f"{short} {100 * item['target_value']:g}%"


def format_reorder(payload: dict[str, Any]) -> str:
    """One row per item, then the alerts and a caution."""
    w = payload["window"]
    out = [_seed_line(f"Fanfold reorder: demand over {w['first']} to {w['last']} (lead time "
                      f"{w['lead_time']} + review period {w['review_period']} = "
                      f"{w['steps']} periods)", payload)]
    if payload["items"]:
        levels = list(payload["items"][0]["demand_quantiles"])
        rows = []
        for item in payload["items"]:
            qty = [item["mean_demand"], *item["demand_quantiles"].values(),
                   item["reorder_point"], item["safety_stock"], item["inventory_position"],
                   item["suggested_order"]]
            dec = decimals_for(qty)
            rows.append([item["name"], _target(item), *(_fixed(v, dec) for v in qty),
                         percent(item["stockout_probability"]),
                         _fixed(item["expected_shortage"], dec)])
        header = ["item", "target", "mean demand", *(f"q{k}" for k in levels),
                  "reorder point", "safety stock", "position", "order", "P(stock-out)",
                  "exp. shortage"]
        out += ["", render_table(header, rows),
                "position = on hand + on order - backorders; order = what lifts the "
                "position to the reorder point; P(stock-out) and exp. shortage: before an "
                "order placed now arrives, if nothing is ordered"]
    if payload["alerts"]:
        dates = payload["alerts"][0]["dates"]
        show = len(dates) <= 12
        rows = [[f"{a['series']} {'<' if a['below'] else '>'} {a['threshold']:g}",
                 *([percent(p) for p in a["probability"]] if show else []),
                 percent(a["any_step"])] for a in payload["alerts"]]
        out += ["", "alerts: probability of crossing the threshold in each period and in any "
                    "period of the window",
                render_table(["alert", *(dates if show else []), "any period"], rows)]
    out += ["", CAUTION]
    return "\n".join(out)
