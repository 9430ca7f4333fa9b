"""Planning commands of the ``fanfold`` CLI: ``scenario``, ``shocks`` and ``reorder``,
and the ``--plot`` PNG files.

The commands build the same request objects as the HTTP API
(:mod:`service.plan_schemas`) and call the same answers (:mod:`service.compute.planning`), so
``--json`` prints exactly the API's layout; the text views are in
:mod:`service.output.plan_tables`, the charts in :mod:`service.output.plots`. Errors follow
:mod:`service.cli.commands`: a bad option is a
:class:`~service.cli.commands.UsageError` (exit 2), an unwritable file an
:class:`~service.cli.commands.InputError` (exit 1).
"""

from __future__ import annotations

import argparse
import contextlib
import csv
import datetime as dt
import io
import math
import re
import sys
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any, NoReturn

import numpy as np
import pandas as pd
from pydantic import BaseModel, ValidationError

from priors import FanfoldVAR, Forecast
from priors.scenarios import Scenario

from ..compute.planning import replenishment_answer, scenario_answer, shares_answer, shocks_answer
from ..config import Settings
from ..errors import LimitExceeded
from ..output.plan_tables import format_reorder, format_scenario, format_shares, format_shocks
from ..output.plots import fan_chart_png, period_name, responses_png, scenario_png
from ..plan_schemas import ReplenishmentCreate, ScenarioCreate
from .commands import (
    SEED_HELP,
    InputError,
    UsageError,
    _fail,
    _fitted,
    _json,
    _level,
    _one_line,
    _positive_int,
    _quantiles,
    _seed,
    read_data,
    read_text_file,
)

__all__ = ["add_planning_commands", "plot_forecast"]

HISTORY = 36  # periods of data drawn before the forecast in the charts
FAN_BANDS = (50, 80, 95)
SHARE_STEPS = (1, 6, 12)  # and the horizon

SET_FORM = ("SERIES@WHEN=VALUE or SERIES@WHEN=LO:HI, WHEN a step 1, 2, ... or a date "
            "YYYY-MM-DD or YYYY-MM, either bound may be empty (e.g. chains@3=500, "
            "chains@2026-03=:490)")
STOCK_FORM = "NAME=ON_HAND[,ON_ORDER[,BACKORDERS]], NAME a series or a+b; e.g. tyres=2100,900"
QUANTITY_FORM = "NAME=Q with Q > 0, NAME as in --stock; e.g. tyres=500"
ALERT_FORM = "NAME>THRESHOLD or NAME<THRESHOLD; e.g. 'brake_pads>1000'"
STOCK_FILE_REQUIRED = ("item", "on_hand", "on_order")
STOCK_FILE_OPTIONAL = ("backorders", "lot_size")
STOCK_FILE_FORM = (f"a CSV file with a header row and columns {', '.join(STOCK_FILE_REQUIRED)} "
                   f"and optionally {', '.join(STOCK_FILE_OPTIONAL)}")


def _limits() -> Settings:
    """The service's default limits; the CLI does not read FANFOLD_* variables."""
    return Settings.model_construct()


# ---------------------------------------------------------------------- option types
def _finite(text: str, form: str, *, low: float = -math.inf, strict: bool = False) -> float:
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not math.isfinite(value) or value < low or (strict and value == low):
        _fail(f"expected {form}; got {text!r}")
    return value


@dataclass(frozen=True)
class SetCondition:
    """A parsed ``--set``: a step or a date (``month_only`` for YYYY-MM), a value or a
    range with optional bounds."""

    series: str
    step: int | None
    date: dt.date | None
    month_only: bool
    value: float | None
    lower: float | None
    upper: float | None


_DATE = re.compile(r"(\d{4})-(\d{1,2})(?:-(\d{1,2}))?")


def _condition(text: str) -> SetCondition:
    def bad(reason: str = "") -> NoReturn:
        _fail(f"{reason}expected {SET_FORM}; got {text!r}")

    def number(part: str) -> float:
        try:
            value = float(part)
        except ValueError:
            value = math.nan
        if not math.isfinite(value):
            bad(f"{part!r} is not a finite number; ")
        return value

    series, at, rest = text.rpartition("@")
    when, eq, value = (s.strip() for s in rest.partition("="))
    series = series.strip()
    if not (series and at and when and eq and value):
        bad()
    step = date = None
    match = _DATE.fullmatch(when)
    if match:
        year, month, day = (int(g) if g else 1 for g in match.groups())
        try:
            date = dt.date(year, month, day)
        except ValueError:
            bad(f"{when!r} is not a date; ")
    elif when.isdigit() and int(when) >= 1:
        step = int(when)
    else:
        bad(f"{when!r} is neither a step >= 1 nor a date; ")
    month_only = bool(match and not match[3])
    if ":" not in value:
        return SetCondition(series, step, date, month_only, number(value), None, None)
    lo, _, hi = (s.strip() for s in value.partition(":"))
    lower = number(lo) if lo else None
    upper = number(hi) if hi else None
    if lower is None and upper is None:
        bad("a range needs at least one bound; ")
    if lower is not None and upper is not None and lower >= upper:
        bad("a range needs LO below HI; ")
    return SetCondition(series, step, date, month_only, None, lower, upper)


def _stock(text: str) -> tuple[str, tuple[float, ...]]:
    name, eq, numbers = (s.strip() for s in text.partition("="))
    parts = [p.strip() for p in numbers.split(",")]
    if not (name and eq and numbers) or len(parts) > 3 or not all(
            p.strip() for p in name.split("+")):
        _fail(f"expected {STOCK_FORM}; got {text!r}")
    return name, tuple(_finite(p, f"{STOCK_FORM} (numbers >= 0)", low=0.0) for p in parts)


def _quantity(text: str) -> tuple[str, float]:
    name, eq, q = (s.strip() for s in text.partition("="))
    if not (name and eq):
        _fail(f"expected {QUANTITY_FORM}; got {text!r}")
    return name, _finite(q, QUANTITY_FORM, low=0.0, strict=True)


def _alert(text: str) -> dict[str, Any]:
    match = re.fullmatch(r"\s*([^<>]+?)\s*([<>])\s*(\S+)\s*", text)
    if not match:
        _fail(f"expected {ALERT_FORM}; got {text!r}")
    return {"series": match[1], "threshold": _finite(match[3], ALERT_FORM),
            "below": match[2] == "<"}


def _bands(text: str) -> tuple[float, ...]:
    try:
        values = sorted({float(b) for b in text.split(",") if b.strip()})
    except ValueError:
        values = []
    if not values or not all(0 < v < 100 for v in values):
        _fail(f"expected percentages strictly between 0 and 100 such as 68,90; got {text!r}")
    return tuple(values)


def _names(text: str) -> list[str]:
    names = [s.strip() for s in text.split(",")]
    if not all(names):
        _fail(f"expected series names separated by commas, such as tyres,chains; got {text!r}")
    return names


# ---------------------------------------------------------------------- parser
def _add_sampling(parser: argparse.ArgumentParser, *, draws: int, quantiles: str) -> None:
    """--draws, --seed (fresh by default) and --quantiles, shared by scenario and reorder."""
    parser.add_argument("--draws", type=_positive_int, default=draws, metavar="N",
                        help="simulated paths")
    parser.add_argument("--seed", type=_seed, metavar="S", help=SEED_HELP)
    parser.add_argument("--quantiles", type=_quantiles, default="0.05,0.5,0.95",
                        metavar="Q,...", help=quantiles)


def add_planning_commands(sub: Any, *, parents: list[argparse.ArgumentParser],
                          formatter_class: type[argparse.HelpFormatter], data_help: str
                          ) -> None:
    """Register ``scenario``, ``shocks`` and ``reorder`` on the ``fanfold`` subparsers."""
    common = {"parents": parents, "formatter_class": formatter_class}

    sc = sub.add_parser(
        "scenario", help="forecast given planned values or ranges (what if)",
        description="Fit the model and forecast given fixed future values (a sales plan, "
                    "a known promotion) or ranges, beside the forecast without them. Each "
                    "condition's probability beforehand shows how far the scenario is from "
                    "what the data suggest.", **common)
    sc.add_argument("data", metavar="DATA.csv", help=data_help)
    sc.add_argument("--horizon", type=_positive_int, default=12, metavar="H",
                    help="number of periods ahead")
    sc.add_argument("--set", dest="conditions", action="append", type=_condition,
                    metavar="SERIES@WHEN=VALUE|LO:HI",
                    help=f"a condition, repeatable: {SET_FORM}")
    sc.add_argument("--plan", metavar="PLAN.csv",
                    help="fixed values from a CSV file: dates in the first column, one column "
                         "per conditioned series, blank cells free (default: none)")
    _add_sampling(sc, draws=2000, quantiles="comma-separated quantile levels in (0, 1)")
    sc.add_argument("--sweeps", type=_positive_int, default=25, metavar="N",
                    help="Gibbs sweeps per draw for ranges (ignored without ranges)")
    sc.add_argument("--json", action="store_true",
                    help="print the HTTP API's scenario answer as JSON instead of tables")
    sc.add_argument("--plot", metavar="FILE.png",
                    help="also draw the scenario as a PNG (default: no file)")
    sc.set_defaults(run=_scenario)

    sh = sub.add_parser(
        "shocks", help="how a shock to one series spreads to the others",
        description="Fit the model and print impulse responses: how every series moves "
                    "after a surprise in one of them, with posterior bands; optionally the "
                    "share of each series' forecast uncertainty due to each shock.",
        **common)
    sh.add_argument("data", metavar="DATA.csv", help=data_help)
    sh.add_argument("--horizon", type=_positive_int, default=24, metavar="H",
                    help="periods after the shock")
    sh.add_argument("--identification", choices=("recursive", "generalised"),
                    default="recursive",
                    help="recursive: Cholesky in the --order of the series; generalised: "
                         "Pesaran & Shin (1998), no ordering")
    sh.add_argument("--order", dest="ordering", type=_names, metavar="A,B,...",
                    help="recursive only: every series in causal order (default: the data's "
                         "column order)")
    sh.add_argument("--size", dest="shock_size", choices=("sd", "unit"), default="sd",
                    help="sd: a one-standard-deviation shock; unit: an own impact of 1")
    sh.add_argument("--cumulative", action="store_true",
                    help="sum the responses over steps")
    sh.add_argument("--shock", dest="shocks", action="append", metavar="NAME",
                    help="series whose shock to show, repeatable (default: all)")
    sh.add_argument("--shares", action="store_true",
                    help="also the variance decomposition (shares at steps 1, 6, 12 and the "
                         "horizon)")
    sh.add_argument("--draws", type=_positive_int, default=1000, metavar="N",
                    help="posterior draws")
    sh.add_argument("--seed", type=_seed, metavar="S", help=SEED_HELP)
    sh.add_argument("--bands", type=_bands, default="68,90", metavar="P,...",
                    help="central credible bands in percent")
    sh.add_argument("--json", action="store_true",
                    help="print JSON instead of tables: the HTTP API's impulse-response "
                         "layout (only the --shock shocks); with --shares an object "
                         "{\"responses\": ..., \"shares\": ...} of both API layouts")
    sh.add_argument("--plot", metavar="FILE.png",
                    help="also draw the responses as a PNG (default: no file)")
    sh.set_defaults(run=_shocks)

    ro = sub.add_parser(
        "reorder", help="lead-time demand, reorder points and suggested orders",
        description="Fit the model and, per stocked item, print the demand over the lead "
                    "time (+ review period), the reorder point for the target, the safety "
                    "stock, the order that lifts the inventory position to it and the "
                    "chance of a stock-out; and threshold alerts. Stock in the data's units.",
        **common)
    ro.add_argument("data", metavar="DATA.csv", help=data_help)
    ro.add_argument("--lead-time", type=_positive_int, required=True, metavar="L",
                    help="periods until an order arrives (required)")
    ro.add_argument("--review-period", type=_seed, default=0, metavar="R",
                    help="periods between reviews (0 = continuous review)")
    ro.add_argument("--start", type=_positive_int, default=1, metavar="S",
                    help="first period of the demand window (1 = the next period); the "
                         "window has --lead-time + --review-period periods")
    ro.add_argument("--stock", dest="stocks", action="append", type=_stock,
                    metavar="NAME=ON_HAND[,ON_ORDER[,BACKORDERS]]",
                    help="an item, repeatable: its stock; NAME a series or a+b for the sum "
                         "of several (e.g. a kit)")
    ro.add_argument("--stock-file", metavar="POSITIONS.csv",
                    help="items from a CSV file, one per row, beside any --stock: columns "
                         "item (a series, or a+b for a kit), on_hand, on_order, and "
                         "optionally backorders (blank: 0) and lot_size (the suggested "
                         "order is rounded up to whole lots; blank: none) (default: none)")
    target = ro.add_mutually_exclusive_group()
    target.add_argument("--service-level", type=_level, metavar="P",
                        help="probability of no stock-out in a cycle, for every item "
                             "(default: 0.95 unless --fill-rate)")
    target.add_argument("--fill-rate", type=_level, metavar="P",
                        help="share of demand met from stock, for every item; needs "
                             "--order-quantity per item (default: off)")
    ro.add_argument("--order-quantity", dest="quantities", action="append", type=_quantity,
                    metavar="NAME=Q",
                    help="lot size of an item, repeatable (required per item with "
                         "--fill-rate; otherwise orders are rounded up to whole lots)")
    ro.add_argument("--alert", dest="alerts", action="append", type=_alert,
                    metavar="'NAME>T'|'NAME<T'",
                    help="probability that a series goes above (or below) a threshold in "
                         "the window, repeatable")
    _add_sampling(ro, draws=4000, quantiles="quantile levels of lead-time demand to report")
    ro.add_argument("--json", action="store_true",
                    help="print the HTTP API's replenishment answer as JSON instead of a table")
    ro.set_defaults(run=_reorder)


# ---------------------------------------------------------------------- helpers
_FIELDS = {"conditions": "--set/--plan condition", "items": "--stock item",
           "alerts": "--alert", "request": "request"}


def _request(cls: type[BaseModel], *, item_labels: Sequence[str] = (), **fields: Any) -> Any:
    """``cls(**fields)``; a validation error becomes a one-line usage error naming the
    option (``item_labels``: where each of the ``items`` came from, when not all from
    --stock)."""
    try:
        return cls(**fields)
    except ValidationError as exc:
        err = exc.errors()[0]
        loc = [str(p) for p in err["loc"]] or ["request"]
        where = _FIELDS.get(loc[0], "--" + loc[0].replace("_", "-"))
        if len(loc) > 1 and loc[1].isdigit():
            k = int(loc[1])
            if loc[0] == "items" and k < len(item_labels):
                where = item_labels[k]
            else:
                where += f" {k + 1}"
            where += "".join(f", {p}" for p in loc[2:])
        message = _one_line(err["msg"]).removeprefix("Value error, ")
        raise UsageError(f"{where}: {message}") from None


@contextlib.contextmanager
def _within_limits() -> Iterator[None]:
    try:
        yield
    except LimitExceeded as exc:
        raise UsageError(exc.message) from None


def _history(model: FanfoldVAR, periods: int = HISTORY) -> pd.DataFrame:
    """The last ``periods`` complete rows of the data in their own units."""
    series = model.series_
    index = series.calendar.index
    m = min(periods, series.levels.shape[0] if index is None else len(index))
    return pd.DataFrame(series.levels[-m:], columns=list(series.names),
                        index=None if index is None else index[-m:])


def _write_png(path: str, draw: Callable[..., Any], *args: Any, **kwargs: Any) -> None:
    try:
        draw(path, *args, **kwargs)
    except OSError as exc:
        raise InputError(f"cannot write {path!r}: {_one_line(exc)}") from exc
    print(f"fanfold: wrote {path}", file=sys.stderr)


def plot_forecast(path: str, model: FanfoldVAR, forecast: Forecast, *, cumulative: bool
                  ) -> None:
    """``fanfold forecast --plot``: the fan chart after the last 36 periods of data
    (running totals have no past to show)."""
    title = ("Forecast of running totals: median and central bands" if cumulative
             else None)
    _write_png(path, fan_chart_png, None if cumulative else _history(model), forecast,
               bands=FAN_BANDS, title=title)


# ---------------------------------------------------------------------- scenario
def _resolve_month(model: FanfoldVAR, c: SetCondition, horizon: int) -> dt.date:
    """The forecast period in the month of a YYYY-MM condition (the first of the month
    when none is, so the model's error names the forecast's dates)."""
    assert c.date is not None
    known = 0 if model.ragged_ is None else model.ragged_.values.shape[0]
    dates = model.series_.calendar.future(known + horizon)
    if dates is None:
        return c.date
    hits = [d.date() for d in dates if (d.year, d.month) == (c.date.year, c.date.month)]
    if len(hits) > 1:
        raise UsageError(f"--set {c.series}@{c.date:%Y-%m}: the month holds "
                         f"{len(hits)} forecast periods of {model.series_.calendar.kind} "
                         "data; give the date as YYYY-MM-DD")
    return hits[0] if hits else c.date


def _set_conditions(model: FanfoldVAR, args: argparse.Namespace) -> list[dict[str, Any]]:
    out = []
    for c in args.conditions or ():
        when: dict[str, Any] = {"step": c.step} if c.step is not None else {
            "date": _resolve_month(model, c, args.horizon) if c.month_only else c.date}
        bounds = {"value": c.value} if c.value is not None else {
            k: v for k, v in (("lower", c.lower), ("upper", c.upper)) if v is not None}
        out.append({"series": c.series, **when, **bounds})
    return out


def _plan_conditions(path: str, model: FanfoldVAR, *, dayfirst: bool = False
                     ) -> list[dict[str, Any]]:
    """Fixed values from a plan file: every non-blank cell, by date."""
    plan = read_data(path, dayfirst=dayfirst)
    names = model.series_.names
    out = []
    for column in plan.columns:
        if column not in names:
            raise InputError(f"plan file {path!r}: column {column!r} is not a series of the "
                             f"data; series are {', '.join(names)}")
        raw = plan[column]
        values = pd.to_numeric(raw, errors="coerce")
        bad = raw.notna() & values.isna()
        if bad.any() or not np.isfinite(values.dropna().to_numpy(dtype=np.float64)).all():
            raise InputError(f"plan file {path!r}: column {column!r} holds something other "
                             "than numbers or blanks")
        out += [{"series": column, "date": when.date(), "value": float(v)}
                for when, v in values.dropna().items()]
    return out


def _scenario(args: argparse.Namespace) -> str:
    no_conditions = UsageError(f"give at least one condition with --set {SET_FORM} or --plan")
    if not (args.conditions or args.plan):
        raise no_conditions
    model = _fitted(args)
    conditions = _set_conditions(model, args)
    if args.plan:
        conditions += _plan_conditions(args.plan, model, dayfirst=args.dayfirst)
    if not conditions:
        raise no_conditions
    spec = _request(ScenarioCreate, horizon=args.horizon, draws=args.draws, seed=args.seed,
                    quantiles=list(args.quantiles), sweeps=args.sweeps, conditions=conditions)
    with _within_limits():
        payload = scenario_answer(model, spec, _limits())
    if args.plot:
        scenario = _rebuild_scenario(model, spec, seed=payload["seed"])
        _write_png(args.plot, scenario_png, _history(model), scenario, bands=FAN_BANDS)
    return _json(payload) if args.json else format_scenario(payload, lags=model.lags_)


def _rebuild_scenario(model: FanfoldVAR, spec: ScenarioCreate, *, seed: int) -> Scenario:
    """The :class:`~priors.scenarios.Scenario` behind :func:`scenario_answer` (the same
    seed gives the same draws), for the chart."""
    conds = [model.condition(c.series, c.step if c.step is not None else c.date.isoformat(),
                             value=c.value, lower=c.lower, upper=c.upper, horizon=spec.horizon)
             for c in spec.conditions]
    return model.scenario(spec.horizon, conds, rng=np.random.default_rng(seed),
                          draws=spec.draws, sweeps=spec.sweeps)


# ---------------------------------------------------------------------- shocks
def _shocks(args: argparse.Namespace) -> str:
    model = _fitted(args)
    names = list(model.series_.names)
    chosen = list(dict.fromkeys(args.shocks or names))
    unknown = [s for s in chosen if s not in names]
    if unknown:
        raise UsageError(f"--shock {unknown[0]!r} is not a series; series are "
                         f"{', '.join(names)}")
    common = {"horizon": args.horizon, "identification": args.identification,
              "ordering": args.ordering, "draws": args.draws, "seed": args.seed,
              "bands": args.bands, "limits": _limits()}
    with _within_limits():
        responses = shocks_answer(model, shock_size=args.shock_size,
                                  cumulative=args.cumulative, **common)
        shares = shares_answer(model, **common) if args.shares else None
    responses["responses"] = {s: responses["responses"][s] for s in chosen}
    if args.plot:
        res = model.impulse_responses(
            args.horizon, rng=np.random.default_rng(args.seed), draws=args.draws,
            identification=args.identification, shock_size=args.shock_size,
            ordering=args.ordering, cumulative=args.cumulative)
        _write_png(args.plot, responses_png, res, shocks=chosen, coverages=args.bands,
                   period_name=period_name(model.series_.calendar.kind))
    if args.json:
        return _json(responses if shares is None else {"responses": responses,
                                                       "shares": shares})
    text = format_shocks(responses, period_name=period_name(model.series_.calendar.kind))
    if shares is not None:
        text += "\n\n" + format_shares(shares, (*SHARE_STEPS, args.horizon))
    return text


# ---------------------------------------------------------------------- reorder
def _item_series(model: FanfoldVAR, name: str) -> str | list[str]:
    """A series name, or the parts of 'a+b' (a literal series name wins)."""
    if name in model.series_.names or "+" not in name:
        return name
    return [part.strip() for part in name.split("+")]


@dataclass(frozen=True)
class StockRow:
    """An item of a ``--stock-file``: its name (a series or a+b), on hand, on order,
    backorders, lot size (None: none) and its data row (the first after the header is 1).
    """

    name: str
    numbers: tuple[float, float, float]
    lot_size: float | None
    row: int

    @property
    def where(self) -> str:
        return f"data row {self.row} ({self.name})"


def _read_stock_file(path: str) -> list[StockRow]:
    """The items of a ``--stock-file``; an :class:`~service.cli.commands.InputError` naming the
    file, data row (the first row after the header is data row 1) and column for anything
    it cannot use."""
    text = read_text_file(path, "stock file")

    def bad(message: str) -> NoReturn:
        raise InputError(f"stock file {path!r}: {message}")

    try:
        rows = list(csv.reader(io.StringIO(text)))
    except csv.Error as exc:
        bad(f"not readable as CSV ({_one_line(exc)}); expected {STOCK_FILE_FORM}")
    while rows and not any(c.strip() for c in rows[0]):
        rows.pop(0)
    if not rows:
        bad(f"the file is empty; expected {STOCK_FILE_FORM}")
    header = [c.strip().lower() for c in rows[0]]
    known = STOCK_FILE_REQUIRED + STOCK_FILE_OPTIONAL
    for column in header:
        if column not in known or header.count(column) > 1:
            problem = "is not a known column" if column not in known else "appears twice"
            bad(f"column {column!r} {problem}; expected {STOCK_FILE_FORM}")
    missing = [c for c in STOCK_FILE_REQUIRED if c not in header]
    if missing:
        bad(f"no {missing[0]!r} column; expected {STOCK_FILE_FORM}")
    out: dict[str, StockRow] = {}
    for number, row in enumerate(rows[1:], start=1):
        if not any(c.strip() for c in row):
            continue  # a blank line
        if len(row) != len(header):
            bad(f"data row {number} has {len(row)} cells for {len(header)} columns")
        cells = {c: v.strip() for c, v in zip(header, row, strict=True)}
        name = cells["item"]
        if not name or not all(part.strip() for part in name.split("+")):
            bad(f"data row {number}: item {name!r} is not a series name or names joined "
                "by '+'")
        where = f"data row {number} ({name})"
        if name in out:
            bad(f"{where}: the item is also on data row {out[name].row}; give each item once")
        values: dict[str, float | None] = {}
        for column in known[1:]:
            cell = cells.get(column, "")
            if not cell:
                if column in STOCK_FILE_REQUIRED:
                    bad(f"{where}: {column} is empty; give a number >= 0")
                values[column] = None
                continue
            try:
                value = float(cell)
            except ValueError:
                value = math.nan
            if not math.isfinite(value):
                bad(f"{where}: {column} {cell!r} is not a number")
            if value < 0 or (column == "lot_size" and value == 0):
                bound = "> 0" if column == "lot_size" else ">= 0"
                bad(f"{where}: {column} is {cell}; it must be {bound}")
            values[column] = value
        numbers = (values["on_hand"] or 0.0, values["on_order"] or 0.0,
                   values["backorders"] or 0.0)
        out[name] = StockRow(name, numbers, values["lot_size"], number)
    if not out:
        bad(f"no items below the header; expected {STOCK_FILE_FORM}")
    return list(out.values())


def _check_stock_series(model: FanfoldVAR, path: str, rows: Sequence[StockRow]) -> None:
    names = model.series_.names
    for row in rows:
        parts = _item_series(model, row.name)
        for part in [parts] if isinstance(parts, str) else parts:
            if part not in names:
                raise InputError(f"stock file {path!r}: {row.where}: unknown series "
                                 f"{part!r}; series are {', '.join(names)}")


def _reorder(args: argparse.Namespace) -> str:
    stocks = dict(args.stocks or ())
    if len(stocks) < len(args.stocks or ()):
        raise UsageError("each --stock NAME may be given once")
    labels = [f"--stock item {k + 1}" for k in range(len(stocks))]
    quantities = dict(args.quantities or ())
    file_rows = _read_stock_file(args.stock_file) if args.stock_file else []
    for row in file_rows:
        if row.name in stocks:
            raise UsageError(f"item {row.name!r} is in --stock and in the stock file "
                             f"({row.where}); give it once")
        if row.lot_size is not None and row.name in quantities:
            raise UsageError(f"--order-quantity {row.name!r}: the stock file gives its "
                             f"lot_size ({row.where}); give it once")
        stocks[row.name] = row.numbers
        labels.append(f"stock file {args.stock_file!r}, {row.where}")
    quantities.update({row.name: row.lot_size for row in file_rows
                       if row.lot_size is not None})
    if not stocks and not args.alerts:
        raise UsageError(f"give at least one --stock {STOCK_FORM}, a --stock-file or an "
                         f"--alert {ALERT_FORM}")
    extra = [q for q in quantities if q not in stocks]
    if extra:
        raise UsageError(f"--order-quantity {extra[0]!r} names no --stock item; expected "
                         f"{QUANTITY_FORM}")
    missing = [s for s in stocks if s not in quantities]
    if args.fill_rate is not None and missing:
        raise UsageError(f"--fill-rate needs --order-quantity (or a lot_size in the stock "
                         f"file) for every item; missing for {missing[0]!r} (expected "
                         f"{QUANTITY_FORM})")
    model = _fitted(args)
    if file_rows:
        _check_stock_series(model, args.stock_file, file_rows)
    service_level = 0.95 if args.fill_rate is None and args.service_level is None \
        else args.service_level
    items = [{"series": _item_series(model, name), "name": name,
              **dict(zip(("on_hand", "on_order", "backorders"), numbers, strict=False)),
              "service_level": service_level, "fill_rate": args.fill_rate,
              "order_quantity": quantities.get(name)}
             for name, numbers in stocks.items()]
    spec = _request(ReplenishmentCreate, item_labels=labels, lead_time=args.lead_time,
                    review_period=args.review_period, start=args.start, items=items,
                    alerts=args.alerts or [], quantiles=list(args.quantiles),
                    draws=args.draws, seed=args.seed)
    with _within_limits():
        payload = replenishment_answer(model, spec, _limits())
    return _json(payload) if args.json else format_reorder(payload)
