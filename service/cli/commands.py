"""Command line: ``fanfold forecast DATA.csv --horizon 12`` and ``fanfold fit DATA.csv``.

Parses the arguments, reads the CSV, calls :class:`priors.FanfoldVAR` and prints text
(:mod:`service.output.tables`) or JSON (:mod:`service.serialization`). Every expected failure
is one line ``fanfold: error: <message>`` on stderr, with exit status 2 for a bad command
line or model settings (:class:`priors.SpecificationError`) and 1 for a data file that
cannot be read or used (any other :class:`priors.PriorsError`).
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import math
import os
import secrets
import sys
import warnings
from collections.abc import Callable, Sequence
from importlib.metadata import PackageNotFoundError, version
from typing import Any, NoReturn

import numpy as np
import pandas as pd

from priors import (
    TRANSFORMS,
    ConvergenceWarning,
    FanfoldVAR,
    NegativeValuesWarning,
    PriorsError,
    SpecificationError,
)
from priors.model import default_max_lags

from ..compute.engine import blas_threads, simulate_forecast
from ..output.tables import format_backtest, format_fit, format_forecast, format_ranking
from ..serialization import (
    convergence_summary,
    convergence_warnings,
    forecast_to_dict,
    frame_from_csv,
    quantile_key,
    summary_to_dict,
)

__all__ = ["InputError", "UsageError", "build_parser", "main", "read_data"]

EXIT_DATA, EXIT_USAGE = 1, 2
PRIORS = ("minnesota", "independent", "flat")  # as accepted by FanfoldVAR(prior=...)


class UsageError(Exception):
    """A bad command line (exit status 2)."""


class InputError(Exception):
    """A data file that cannot be read, or an output file that cannot be written (1)."""


#: the seed rule of every command that draws random numbers
SEED_RULE = ("default: a fresh random seed, printed with the output, so --seed with it "
             "repeats the numbers exactly")
SEED_HELP = f"random seed; {SEED_RULE}"

def _one_line(text: object) -> str:
    return " ".join(str(text).split())


def read_text_file(path: str, what: str) -> str:
    """The text of the file at ``path`` (a byte-order mark dropped); :class:`InputError`
    naming ``what`` ("data file", "stock file") when it is missing or unreadable."""
    try:
        with open(path, encoding="utf-8-sig", newline="") as fh:
            return fh.read()
    except FileNotFoundError:
        raise InputError(f"{what} {path!r} not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read {what} {path!r}: {_one_line(exc)}") from exc


def read_data(path: str, *, dayfirst: bool = False) -> pd.DataFrame:
    """The series in the CSV file at ``path``, see :func:`frame_from_csv`."""
    return frame_from_csv(read_text_file(path, "data file"), dayfirst=dayfirst)


# ---------------------------------------------------------------------- option types
def _fail(message: str) -> NoReturn:
    raise argparse.ArgumentTypeError(message)


def _integer(low: int) -> Callable[[str], int]:
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            value = low - 1
        if value < low:
            _fail(f"expected an integer >= {low}; got {text!r}")
        return value

    return parse


def _number(text: str, low: float = 0.0, high: float = math.inf) -> float:
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not low < value < high:
        between = f"> {low:g}" if high == math.inf else f"strictly between {low:g} and {high:g}"
        _fail(f"expected a number {between}; got {text!r}")
    return value


def _level(text: str) -> float:
    return _number(text, 0.0, 1.0)


def _quantiles(text: str) -> tuple[float, ...]:
    levels = sorted({_level(p) for p in (s.strip() for s in text.split(",")) if p})
    keys = {quantile_key(q) for q in levels}
    if not levels or len(keys) < len(levels):
        _fail(f"expected distinct levels in (0, 1) such as 0.05,0.5,0.95; got {text!r}")
    return tuple(levels)


def _transform_name(name: str) -> str:
    if name not in TRANSFORMS:
        _fail(f"unknown transform {name!r}; choose one of {', '.join(TRANSFORMS)}")
    return name


def _transform(text: str) -> str | dict[str, str] | None:
    if text.strip() == "auto":
        return "auto"
    if "=" not in text:
        return _transform_name(text.strip())
    spec: dict[str, str] = {}
    for item in text.split(","):
        series, sep, name = (s.strip() for s in item.partition("="))
        if not (series and sep) or series in spec:
            _fail("expected one name for all series or SERIES=TRANSFORM pairs with distinct "
                  f"series, like tyres=log,chains=diff; got {text!r}")
        spec[series] = _transform_name(name)
    return spec


_positive_int, _seed = _integer(1), _integer(0)


_CANDIDATE_KEYS = ("lags", "max_lags", "prior", "tightness", "decay", "sum_coef", "initial",
                   "season_scale", "hyperprior", "constant", "trend", "seasonal", "transforms")


def _value(text: str) -> object:
    low = text.lower()
    if low in ("auto", "minnesota", "flat", "none", "off", "log", "log1p", "diff", "logdiff"):
        return None if low in ("none", "off") else low
    if low in ("true", "false"):
        return low == "true"
    for kind in (int, float):
        try:
            return kind(text)
        except ValueError:
            pass
    _fail(f"cannot read the value {text!r}")


def _candidate(text: str) -> tuple[str, dict[str, object]]:
    name, sep, pairs = text.partition(":")
    if not (name.strip() and sep):
        _fail(f"expected NAME:K=V,... such as short:lags=2; got {text!r}")
    settings: dict[str, object] = {}
    for item in filter(None, (p.strip() for p in pairs.split(","))):
        key, eq, value = item.partition("=")
        if not eq or key not in _CANDIDATE_KEYS:
            _fail(f"unknown setting {key!r} in {text!r}; use {', '.join(_CANDIDATE_KEYS)}")
        settings[key] = _value(value.strip())
    return name.strip(), settings


def _outlier(text: str) -> tuple[str, int]:
    date, sep, periods = text.rpartition(":")
    try:
        if not sep or not date:
            raise ValueError
        return (dt.date.fromisoformat(date).isoformat(), int(periods))
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected DATE:PERIODS such as 2020-04-01:3; got {text!r}") from None


def _lags(text: str) -> int | str:
    return "auto" if text == "auto" else _positive_int(text)


def _tightness(text: str) -> float | str:
    return "auto" if text == "auto" else _number(text)


def _weight(text: str) -> float | str | None:
    return None if text == "off" else _tightness(text)


# ---------------------------------------------------------------------- parser
class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> NoReturn:
        raise UsageError(f"{message} (see '{self.prog} --help')")


class _HelpFormatter(argparse.ArgumentDefaultsHelpFormatter):
    """Appends "(default: X)" unless the help text already states the default."""

    def _get_help_string(self, action: argparse.Action) -> str:
        text = action.help or ""
        if "default" in text or action.default is None or action.required:
            return text
        return super()._get_help_string(action) or text


def _model_options() -> argparse.ArgumentParser:
    parent = _Parser(add_help=False)
    g = parent.add_argument_group("model options")
    g.add_argument("--lags", type=_lags, default="auto", metavar="N|auto",
                   help="lag order, or 'auto' to choose 1..--max-lags by marginal likelihood "
                        "(by BIC with --prior flat)")
    g.add_argument("--max-lags", type=_positive_int, metavar="N",
                   help="largest lag order tried by --lags auto (default: by data frequency: "
                        + ", ".join(f"{default_max_lags(kind)} {kind}" for kind in
                                    ("monthly", "quarterly", "weekly", "daily"))
                        + f", else {default_max_lags('other')})")
    g.add_argument("--prior", choices=PRIORS, default="minnesota",
                   help="Minnesota shrinkage (natural-conjugate: exact posterior), "
                        "independent (the full Minnesota pattern with --cross, sampled by "
                        "Gibbs), or flat (posterior mean = OLS estimates)")
    g.add_argument("--tightness", type=_tightness, default="auto", metavar="X|auto",
                   help="prior s.d. of each series' own first lag, or 'auto' to maximise the "
                        "marginal likelihood; ignored with --prior flat")
    g.add_argument("--decay", type=_number, default=1.0, metavar="X",
                   help="lag decay: the prior s.d. of lag l is tightness / l**X")
    g.add_argument("--sum-coef", type=_weight, default="auto", metavar="X|auto|off",
                   help="weight of the sum-of-coefficients prior (smaller = tighter; for "
                        "trending series); 'auto': used when it raises the marginal "
                        "likelihood, weight tuned (default: auto)")
    g.add_argument("--initial", type=_weight, default="auto", metavar="X|auto|off",
                   help="weight of the dummy-initial-observation prior (smaller = tighter); "
                        "'auto' as for --sum-coef (default: auto)")
    g.add_argument("--hyperprior", action=argparse.BooleanOptionalAction, default=True,
                   help="tune by the posterior mode under the Gamma hyperpriors of Giannone, "
                        "Lenza & Primiceri (2015) instead of the marginal likelihood alone")
    g.add_argument("--transform", type=_transform, default="auto", metavar="SPEC|auto",
                   help=f"{', '.join(TRANSFORMS)} for all series, or per series such as "
                        "tyres=log,chains=diff; 'auto': each series' levels or log (log1p "
                        "with zeros) by marginal likelihood; forecasts are back in the "
                        "data's units (default: auto)")
    g.add_argument("--seasonal", nargs="?", const="on", default="auto",
                   choices=("auto", "on", "off"), type=str.lower,
                   help="seasonal dummies (months, quarters or weekdays, by the data's "
                        "frequency): on, off, or auto (by marginal likelihood); --seasonal "
                        "alone means on (default: auto)")
    g.add_argument("--season-scale", type=_weight, default="auto", metavar="X|auto|off",
                   help="prior s.d. of the seasonal-dummy coefficients in residual s.d. per "
                        "unit of the dummy's root mean square; 'auto': tuned; off: nearly "
                        "flat (default: auto)")
    g.add_argument("--counts", nargs="?", const="on", default="auto",
                   choices=("auto", "on", "off"), type=str.lower,
                   help="count-aware demand: forecasts censored at zero, reorder points and "
                        "orders in whole units; auto: for series whose values are all whole "
                        "numbers >= 0 (default: auto)")
    g.add_argument("--trend", action="store_true", help="add a linear time trend")
    g.add_argument("--no-constant", dest="constant", action="store_false",
                   help="leave out the constant (default: keep it)")
    gibbs = parent.add_argument_group(
        "Gibbs sampler (--prior independent or --volatility common)")
    gibbs.add_argument("--cross", type=_number, default=1.0, metavar="X",
                       help="prior s.d. of other series' lags as a multiple of own lags' "
                            "(below 1: cross-effects shrunk harder)")
    gibbs.add_argument("--volatility", choices=("constant", "common"), default="constant",
                       help="common: one stochastic volatility for all series (calm and "
                            "turbulent periods), sampled by Gibbs; minnesota prior only")
    gibbs.add_argument("--outlier", dest="outliers", action="append", type=_outlier,
                       metavar="DATE:PERIODS",
                       help="a known-date period (promotion, stock-out, supply shock) whose "
                            "shocks get their own estimated scale, e.g. 2020-04-01:3; "
                            "repeatable; --prior independent only (default: none)")
    gibbs.add_argument("--sample-hyper", action="store_true",
                       help="sample tightness and cross tightness in the Gibbs loop "
                            "(--prior independent; slower)")
    gibbs.add_argument("--chains", type=_positive_int, default=4, metavar="N",
                       help="chains (two or more for convergence diagnostics)")
    gibbs.add_argument("--burn", type=_integer(0), default=500, metavar="N",
                       help="sweeps discarded at the start of each chain")
    gibbs.add_argument("--keep", type=_positive_int, default=1000, metavar="N",
                       help="draws kept per chain")
    gibbs.add_argument("--thin", type=_positive_int, default=1, metavar="N",
                       help="sweeps per kept draw")
    gibbs.add_argument("--workers", type=_positive_int, default=1, metavar="N",
                       help="processes running the chains (backtest: running origins) in "
                            "parallel; the same draws for any N, to rounding")
    return parent


def _data_options() -> argparse.ArgumentParser:
    parent = _Parser(add_help=False)
    g = parent.add_argument_group("data file options")
    g.add_argument("--dayfirst", action="store_true",
                   help="read dates such as 01/02/2024 day first (1 February) instead of "
                        "month first (2 January, the default unless the first date only "
                        "reads day first, like 31/01/2024); dates starting with the year "
                        "(2024-02-01) are read year, month, day either way")
    return parent


def build_parser() -> argparse.ArgumentParser:
    """The ``fanfold`` parser with its commands (the planning ones from
    :mod:`service.cli.planning`)."""
    parser = _Parser(prog="fanfold", formatter_class=_HelpFormatter,
                     description="Bayesian VAR forecasts of monthly (or other regular) "
                                 "demand series from a CSV file.")
    parser.add_argument("--version", action="version", version=f"%(prog)s {_version()}")
    parser.add_argument("--blas-threads", type=_seed, default=1, metavar="N",
                        help="threads for linear algebra; 0 = the libraries' default. One "
                             "thread was fastest at every model size on 2-core machines "
                             "(see DEVELOPERS.md, benchmarks)")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    common = {"parents": [_data_options(), _model_options()], "formatter_class": _HelpFormatter}
    data_help = "CSV file: a header row, dates in the first column, one column per series"

    fc = sub.add_parser("forecast", help="forecast every series with uncertainty bands",
                        description="Fit the model and print the forecast of every series.",
                        **common)
    fc.add_argument("data", metavar="DATA.csv", help=data_help)
    fc.add_argument("--horizon", type=_positive_int, required=True, metavar="H",
                    help="number of periods after the last date of the file (required). "
                         "When the last periods are incomplete (some series still empty), "
                         "they are forecast too, given the values already there, so the "
                         "output starts with them and has H more; a note on stderr says so")
    fc.add_argument("--draws", type=_positive_int, default=2000, metavar="N",
                    help="simulated paths")
    fc.add_argument("--seed", type=_seed, metavar="S",
                    help=f"random seed of the forecast draws and the Gibbs chains; {SEED_RULE}")
    fc.add_argument("--quantiles", type=_quantiles, default="0.05,0.5,0.95", metavar="Q,...",
                    help="comma-separated quantile levels in (0, 1)")
    fc.add_argument("--out", metavar="FILE.csv",
                    help="also write a tidy CSV: series, date, step, mean, median, "
                         "q<level>... (default: no file)")
    fc.add_argument("--cumulative", action="store_true",
                    help="report running totals over steps 1..h (e.g. total demand up to each "
                         "date), summed path by path so cross-period correlation counts")
    fc.add_argument("--lead-time", type=_integer(1), metavar="L",
                    help="also report each series' total demand over steps 1..L (path by "
                         "path), e.g. over a replenishment lead time (default: off)")
    fc.add_argument("--reject-explosive", action="store_true",
                    help="drop parameter draws with explosive dynamics (companion spectral "
                         "radius >= 1) and report the share dropped")
    fc.add_argument("--json", action="store_true", help="print JSON instead of tables")
    fc.add_argument("--plot", metavar="FILE.png",
                    help="also draw a fan chart (50, 80, 95%% bands after the last 36 "
                         "periods of data) as a PNG (default: no file)")
    fc.set_defaults(run=_forecast)

    fit = sub.add_parser("fit", help="fit the model and summarise the posterior",
                         description="Fit the model and print the chosen lags, "
                                     "hyperparameters and (with --summary) the posterior.",
                         **common)
    fit.add_argument("data", metavar="DATA.csv", help=data_help)
    fit.add_argument("--summary", action="store_true",
                     help="also print lag search, coefficients, the error covariance and "
                          "(--prior independent) the chains' convergence: worst R-hat, "
                          "smallest bulk and tail ESS, and what failed")
    fit.add_argument("--level", type=_level, default=0.9,
                     help="coverage of the coefficients' credible intervals")
    fit.add_argument("--seed", type=_seed, metavar="S",
                     help="random seed of the Gibbs chains and of the draws behind the "
                          f"spectral-radius summary; {SEED_RULE}")
    fit.add_argument("--json", action="store_true",
                     help="print the full summary as JSON (implies --summary; "
                          "\"diagnostics\" is null for exact samplers)")
    fit.set_defaults(run=_fit)

    serve = sub.add_parser("serve", help="run the HTTP service",
                           description="Run the HTTP API (uvicorn). Settings come from "
                                       "FANFOLD_* environment variables; see DEVELOPERS.md.",
                           formatter_class=_HelpFormatter)
    serve.add_argument("--host", default="127.0.0.1",
                       help="address to bind; only loopback while API keys are not configured")
    serve.add_argument("--port", type=_positive_int, default=8000, help="port to listen on")
    serve.add_argument("--workers", type=_positive_int, default=1,
                       help="worker processes; set PROMETHEUS_MULTIPROC_DIR so that "
                            "/metrics counts for all of them (see deploy/README.md)")
    serve.add_argument("--demo", action="store_true",
                       help="store the bicycle-parts demo model first and print example "
                            "requests")
    serve.set_defaults(run=_serve)

    bt = sub.add_parser("backtest", help="score past forecasts at rolling origins",
                        description="Refit the model at each of the last --origins dates, "
                                    "forecast --horizon steps, and score the forecasts "
                                    "against what happened, beside the OLS VAR, a random "
                                    "walk and (with --period) a seasonal naive forecast.",
                        **common)
    bt.add_argument("data", metavar="DATA.csv", help=data_help)
    bt.add_argument("--origins", type=_positive_int, default=24, help="forecast origins")
    bt.add_argument("--horizon", type=_positive_int, default=12, help="steps ahead")
    bt.add_argument("--window", type=_positive_int, metavar="N",
                    help="fit on the last N periods only (default: all data, expanding)")
    bt.add_argument("--draws", type=_positive_int, default=1000, metavar="N",
                    help="simulated paths per origin")
    bt.add_argument("--coverage", type=_level, default=0.9,
                    help="central interval whose coverage is scored")
    bt.add_argument("--period", type=_positive_int, metavar="P",
                    help="seasonal period for the seasonal-naive benchmark (e.g. 12); "
                         "default: off")
    bt.add_argument("--seed", type=_seed, metavar="S", help=SEED_HELP)
    bt.add_argument("--candidate", action="append", type=_candidate, metavar="NAME:K=V,...",
                    help="compare settings instead: each candidate is the model options "
                         "above changed by K=V pairs (e.g. 'short:lags=2' or "
                         "'dummies:sum_coef=auto,initial=auto'); repeat to rank several on "
                         "the same origins by CRPS relative to the random walk "
                         "(default: no comparison)")
    bt.add_argument("--ets", action="store_true",
                    help="add per-series exponential smoothing as a benchmark (needs "
                         "statsmodels: pip install 'fanfold[evaluation]')")
    bt.add_argument("--json", action="store_true",
                    help="print the scores as JSON records instead of tables")
    bt.add_argument("--report", metavar="FILE.html",
                    help="also write a self-contained HTML page with the tables and plots "
                         "(default: no file)")
    bt.set_defaults(run=_backtest)

    from .planning import add_planning_commands  # imports this module: not at the top

    add_planning_commands(sub, data_help=data_help, **common)

    from .batch import add_batch_command  # imports this module: not at the top

    add_batch_command(sub, parents=[_model_options()], formatter_class=_HelpFormatter)

    keys = sub.add_parser("keys", help="manage API keys", formatter_class=_HelpFormatter,
                          description="Create API keys. The server stores only their hashes.")
    keys_sub = keys.add_subparsers(dest="keys_command", metavar="ACTION", required=True)
    new = keys_sub.add_parser("new", help="create a key for a tenant",
                              formatter_class=_HelpFormatter,
                              description="Print a new random key (shown once) and the "
                                          "FANFOLD_API_KEYS entry that holds its hash.")
    new.add_argument("--id", required=True, dest="key_id", help="key id (letters, digits, _-)")
    new.add_argument("--tenant", required=True, help="tenant the key belongs to")
    new.set_defaults(run=_new_key)
    return parser


def _version() -> str:
    try:
        return version("fanfold")
    except PackageNotFoundError:
        return "unknown"


# ---------------------------------------------------------------------- commands
def _interactive() -> bool:
    """Whether stderr is a terminal: progress bars are drawn only there."""
    return sys.stderr.isatty()


def _progress_bar(label: str, unit: str) -> Callable[[int, int], None]:
    """A ``progress(done, total)`` callback drawing a bar on stderr (terminals only)."""

    def progress(done: int, total: int) -> None:
        if _interactive():
            bar = "#" * (30 * done // max(total, 1))
            print(f"\rfanfold: {label} [{bar:<30}] {done}/{total} {unit}", end="",
                  file=sys.stderr, flush=True)
            if done >= total:
                print(file=sys.stderr)

    return progress


def _model_params(args: argparse.Namespace) -> dict[str, Any]:
    """FanfoldVAR's settings from the model options (the Gibbs ones for --prior
    independent, and --cross whenever given, so that FanfoldVAR refuses it elsewhere)."""
    params = {"lags": args.lags, "max_lags": args.max_lags, "prior": args.prior,
              "tightness": args.tightness, "decay": args.decay, "sum_coef": args.sum_coef,
              "initial": args.initial, "hyperprior": args.hyperprior,
              "season_scale": args.season_scale, "constant": args.constant,
              "trend": args.trend,
              "seasonal": {"on": True, "off": False}.get(args.seasonal, args.seasonal),
              "counts": {"on": True, "off": False}.get(args.counts, args.counts),
              "transforms": args.transform}
    if args.prior == "independent" or args.cross != 1.0:
        params["cross"] = args.cross
    if args.outliers:
        params["outliers"] = args.outliers
    if args.sample_hyper:
        params["sample_hyper"] = True
    if args.volatility != "constant":
        params["volatility"] = args.volatility
    if _uses_gibbs(args):
        params.update(chains=args.chains, burn=args.burn, keep=args.keep, thin=args.thin,
                      workers=args.workers)
    return params


def _uses_gibbs(args: argparse.Namespace) -> bool:
    return args.prior == "independent" or args.volatility != "constant"


def _fitted(args: argparse.Namespace) -> FanfoldVAR:
    """The model fitted to the data file. The Gibbs chains of --prior independent start
    from --seed; without one, a fresh seed is drawn and kept in ``args.seed``, so the seed
    printed with the output reproduces the fit as well as the draws."""
    model = FanfoldVAR(**_model_params(args))
    data = read_data(args.data, dayfirst=args.dayfirst)
    if not _uses_gibbs(args):
        return model.fit(data)
    if getattr(args, "seed", None) is None:
        args.seed = secrets.randbits(32)
    return model.fit(data, rng=np.random.default_rng(args.seed),
                     progress=_progress_bar(f"Gibbs sampler, {args.chains} chain(s)",
                                            "chain sweeps"))


def _json(payload: dict[str, Any]) -> str:
    return json.dumps(payload, indent=2, allow_nan=False)


def _incomplete_note(model: FanfoldVAR, horizon: int) -> str | None:
    """A note that the last periods of the data are incomplete and forecast too, or
    None."""
    ragged = model.ragged_
    if ragged is None:
        return None
    r = ragged.values.shape[0]
    names = model.series_.names
    unknown = [nm for j, nm in enumerate(names) if np.isnan(ragged.values[:, j]).any()]
    dates = model.series_.calendar.future(r)
    if dates is None:
        last = model.series_.levels.shape[0]
        span = f"data rows {last + 1} to {last + r}" if r > 1 else f"data row {last + 1}"
    else:
        span = (f"{dates[0].date()} to {dates[-1].date()}" if r > 1
                else str(dates[0].date()))
    which = "the last period" if r == 1 else f"the last {r} periods"
    who = ", ".join(unknown[:-1]) + " and " + unknown[-1] if len(unknown) > 1 else unknown[0]
    return (f"{which} ({span}) {'is' if r == 1 else 'are'} incomplete: {who} "
            f"{'is' if len(unknown) == 1 else 'are'} not known yet; forecasting "
            f"{'it' if r == 1 else 'them'} plus {horizon} period{'s' if horizon > 1 else ''} "
            "ahead")


def _forecast(args: argparse.Namespace) -> str:
    model = _fitted(args)
    note = _incomplete_note(model, args.horizon)
    if note:
        print(f"fanfold: note: {note}", file=sys.stderr)
    seed = secrets.randbits(32) if args.seed is None else args.seed
    fc, totals = simulate_forecast(
        model, horizon=args.horizon, draws=args.draws, seed=seed,
        reject_explosive=args.reject_explosive, lead_time=args.lead_time,
        quantiles=args.quantiles, cumulative=args.cumulative)
    if args.out:
        table = fc.to_frame(args.quantiles)
        # say in the file itself whether its numbers are per period or running totals
        table.insert(3, "values", "running total from step 1" if args.cumulative
                     else "per period")
        try:
            table.to_csv(args.out, index=False)
        except OSError as exc:
            raise InputError(f"cannot write {args.out!r}: {_one_line(exc)}") from exc
        print(f"fanfold: wrote {len(table)} rows to {args.out}", file=sys.stderr)
    if args.plot:
        from .planning import plot_forecast

        plot_forecast(args.plot, model, fc, cumulative=args.cumulative)
    payload = forecast_to_dict(model, fc, quantiles=args.quantiles, seed=seed, draws=args.draws,
                               convergence=convergence_summary(model))
    for warning in convergence_warnings(payload["convergence"]):  # the data's advice is
        print(f"fanfold: warning: {warning}", file=sys.stderr)  # a Python warning already
    payload["cumulative"] = bool(args.cumulative)
    payload["lead_time_totals"] = totals
    return _json(payload) if args.json else format_forecast(payload)


def _fit(args: argparse.Namespace) -> str:
    model = _fitted(args)
    payload = summary_to_dict(model, args.level, rng=np.random.default_rng(args.seed))
    report = model.convergence()  # None for exact samplers
    payload["diagnostics"] = None if report is None else report.summary()
    payload["seed"] = args.seed
    if args.json:
        return _json(payload)
    sampler = None
    if model.sampler_ is not None:
        sampler = (f"{args.chains} chain(s) x {args.keep} draws after {args.burn} burn-in "
                   f"sweeps, thin {args.thin}, seed {args.seed}")
    return format_fit(payload, prior=args.prior, level=args.level, summary=args.summary,
                      sampler=sampler)


def _backtest(args: argparse.Namespace) -> str:
    from priors.backtest import rolling_origin

    frame = read_data(args.data, dayfirst=args.dayfirst)
    params = _model_params(args)
    benchmarks = ("ols_var", "random_walk") + (("seasonal_naive",) if args.period else ())
    if args.prior == "flat":
        benchmarks = tuple(b for b in benchmarks if b != "ols_var")
    progress = _progress_bar("backtest", "origins")

    if args.candidate:
        from priors.backtest import rank_settings

        candidates = {name: {**params, **changes} for name, changes in args.candidate}
        table = rank_settings(frame, candidates, rng=np.random.default_rng(args.seed),
                              origins=args.origins, horizon=args.horizon, window=args.window,
                              draws=args.draws, coverage=args.coverage, workers=args.workers)
        if args.json:
            return _json({"ranking": table.to_dict(orient="records")})
        return format_ranking(table, seed=args.seed)
    extra = None
    if args.ets:
        import functools

        from ..compute.ets import ets_forecast, require_statsmodels

        require_statsmodels()
        extra = {"ets": functools.partial(ets_forecast, period=args.period)}
    result = rolling_origin(frame, params=params, origins=args.origins, horizon=args.horizon,
                            window=args.window, draws=args.draws, coverage=args.coverage,
                            period=args.period, benchmarks=benchmarks,
                            rng=np.random.default_rng(args.seed), progress=progress,
                            workers=args.workers, extra=extra)
    scores = result.scores()
    if args.report:
        from ..output.report import backtest_report

        page = backtest_report(result, title=f"Fanfold backtest of {args.data}",
                               settings={"origins": args.origins, "horizon": args.horizon,
                                         "draws": args.draws, "seed": args.seed,
                                         **{k: v for k, v in params.items() if v is not None}},
                               data=frame)
        try:
            with open(args.report, "w", encoding="utf-8") as fh:
                fh.write(page)
        except OSError as exc:
            raise InputError(f"cannot write {args.report!r}: {_one_line(exc)}") from exc
        print(f"fanfold: wrote {args.report}", file=sys.stderr)
    logs, energy, calibration = result.log_scores(), result.energy_scores(), _calibration(result)
    if args.json:
        return _json({"origins": len(result.origins), "horizon": args.horizon,
                      "coverage": args.coverage, "seed": args.seed,
                      "scores": scores.to_dict(orient="records"),
                      "log_scores": logs.to_dict(orient="records"),
                      "energy_scores": energy.to_dict(orient="records"),
                      "dm_tests": result.dm_tests().to_dict(orient="records"),
                      "calibration": calibration})
    return format_backtest(scores, args.coverage, logs, result.dm_tests(),
                           energy_scores=energy, calibration=calibration,
                           origins=len(result.origins), seed=args.seed)


def _calibration(result: Any) -> list[dict[str, Any]]:
    """HAC PIT moment tests per model, series and horizon (needs 10+ origins)."""
    if len(result.origins) < 10:
        return []
    return result.pit_tests().to_dict(orient="records")


def _database_place(settings: Any) -> str:
    """Where the service keeps its data, in words: the SQLite file's absolute path, or
    the database URL without its password."""
    from sqlalchemy.engine import make_url

    url = make_url(settings.database_url)
    if url.get_backend_name() == "sqlite" and url.database not in (None, "", ":memory:"):
        return f"the SQLite file {os.path.abspath(url.database)}"
    return f"the database {url.render_as_string(hide_password=True)}"


def _serve(args: argparse.Namespace) -> str:
    import ipaddress

    import uvicorn

    from ..config import get_settings

    try:
        loopback = args.host == "localhost" or ipaddress.ip_address(args.host).is_loopback
    except ValueError:
        loopback = False
    keys = get_settings().api_keys
    if not loopback and not keys:
        raise UsageError(f"refusing to bind {args.host}: no API keys are configured "
                         "(FANFOLD_API_KEYS), so the service listens on loopback only "
                         "(e.g. --host 127.0.0.1); create keys with 'fanfold keys new'")
    access = (f"{len(keys)} API key(s) configured" if keys
              else "loopback only: no API keys configured")
    print(f"fanfold: serving on http://{args.host}:{args.port} ({access}); docs at /docs",
          file=sys.stderr, flush=True)
    print(f"fanfold: models and jobs are stored in {_database_place(get_settings())} "
          "(set FANFOLD_DATABASE_URL to choose)", file=sys.stderr, flush=True)
    if args.demo:
        print(_store_demo(f"http://{_url_host(args.host)}:{args.port}"), flush=True)
    from ..logs import configure_logging

    configure_logging()  # this process (the supervisor with --workers > 1)
    from ..http_protocol import NoDelayHTTPProtocol
    from ..metrics import prepare_multiprocess_dir

    # PROMETHEUS_MULTIPROC_DIR set: workers share metrics files there (service/metrics.py);
    # created, and emptied of the last run's files, before any worker starts
    prepare_multiprocess_dir()

    uvicorn.run("service.app:served_app", factory=True, host=args.host, port=args.port,
                workers=args.workers, log_config=None, timeout_graceful_shutdown=20,
                http=NoDelayHTTPProtocol)
    return ""


def _url_host(host: str) -> str:
    return f"[{host}]" if ":" in host else host


def _store_demo(base: str) -> str:
    """Fit the demo data, store it, and return example requests to paste."""
    from ..auth import PUBLIC_TENANT
    from ..compute.engine import fit_model, stored_settings
    from ..config import get_settings
    from ..db import make_engine, make_session_factory
    from ..demo import demo_frame
    from ..migrate import upgrade
    from ..schemas import ModelSettings
    from ..store import save_model

    settings = get_settings()
    engine = make_engine(settings.database_url)
    upgrade(engine)
    frame = demo_frame()
    spec = ModelSettings()
    model, seed = fit_model(spec, frame, settings)
    tenant = settings.api_keys[0].tenant if settings.api_keys else PUBLIC_TENANT
    with make_session_factory(engine)() as session:
        row = save_model(session=session, tenant=tenant, name="bicycle-parts demo",
                         params=stored_settings(model, seed), frame=frame, model=model)
    engine.dispose()
    key = ' -H "X-API-Key: $FANFOLD_KEY"' if settings.api_keys else ""
    return "\n".join([
        f"demo model {row.id}: {', '.join(frame.columns)}, monthly "
        f"{frame.index[0]:%Y-%m} to {frame.index[-1]:%Y-%m}, VAR({model.lags_})",
        "try:",
        f"  curl -s{key} {base}/v1/models/{row.id}",
        f"  curl -s{key} -X POST {base}/v1/models/{row.id}/forecasts "
        "-H 'Content-Type: application/json' -d '{\"horizon\": 6, \"seed\": 1}'",
        f"  curl -s{key} '{base}/v1/models/{row.id}/fan-chart?horizon=12&bands=50,80,95'",
        f"  curl -s{key} '{base}/v1/models/{row.id}/impulse-responses?horizon=12'",
        f"  curl -s{key} -X POST {base}/v1/models/{row.id}/replenishment "
        "-H 'Content-Type: application/json' -d '{\"lead_time\": 3, \"items\": "
        "[{\"series\": \"tyres\", \"on_hand\": 2600, \"service_level\": 0.95}]}'",
        f"  curl -s{key} -X POST '{base}/v1/forecasts?horizon=6&seed=1' "
        "-H 'Content-Type: text/csv' --data-binary @examples/bike_parts_demand.csv",
    ])


def _new_key(args: argparse.Namespace) -> str:
    from pydantic import ValidationError

    from ..auth import new_key

    try:
        key, entry = new_key(args.key_id, args.tenant)
    except ValidationError as exc:
        raise UsageError(f"invalid key id or tenant: {_one_line(exc.errors()[0]['msg'])}"
                         ) from None
    return (f"key (give it to the client, it is not stored): {key}\n"
            f"settings entry (add to the JSON list in FANFOLD_API_KEYS): "
            f"{entry.model_dump_json()}")


def _resolve_seed(args: argparse.Namespace) -> None:
    """The one seed rule of every command (:data:`SEED_RULE`): without --seed, draw a
    fresh seed now; each command's output says which, so the run can be repeated."""
    if not hasattr(args, "seed") or args.seed is not None:
        return
    args.seed = secrets.randbits(32)


def _run(args: argparse.Namespace) -> str:
    """Run the command; warnings (e.g. tuning at a bound) become one-line notes, each once."""
    _resolve_seed(args)
    with warnings.catch_warnings(record=True) as caught, blas_threads(args.blas_threads):
        warnings.simplefilter("always", ConvergenceWarning)
        warnings.simplefilter("always", NegativeValuesWarning)
        try:
            return args.run(args)
        finally:
            for message in dict.fromkeys(_one_line(w.message) for w in caught):
                print(f"fanfold: warning: {message}", file=sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``fanfold`` command; returns the exit status."""
    try:
        args = build_parser().parse_args(argv)
        out = _run(args)
        if out:
            print(out)
    except SystemExit as exc:  # --help and --version
        return exc.code if isinstance(exc.code, int) else 0
    except BrokenPipeError:  # e.g. piped into `head`: stop quietly
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_DATA
    except (UsageError, SpecificationError) as exc:
        print(f"fanfold: error: {_one_line(exc)}", file=sys.stderr)
        return EXIT_USAGE
    except (InputError, PriorsError) as exc:
        print(f"fanfold: error: {_one_line(exc)}", file=sys.stderr)
        return EXIT_DATA
    return 0
