"""The bridge from request specs to :mod:`priors`: data frames, limits, forecasts.

Pure functions of (spec, settings); the routes call them in a worker thread.
"""

from __future__ import annotations

import contextlib
import secrets
from collections.abc import Callable, Sequence
from typing import Any, NamedTuple

import numpy as np
import pandas as pd

from priors import (
    DataError,
    DateRangeError,
    FanfoldVAR,
    Forecast,
    SpecificationError,
    TimeIndexError,
)
from priors.calendar import calendar_from_index, regular_dates
from priors.inventory import window_totals
from priors.model import default_max_lags

from .config import Settings
from .errors import LimitExceeded
from .schemas import BacktestCreate, ForecastSettings, ModelSettings, OutputSettings, SeriesData
from .serialization import forecast_to_dict, quantile_key

__all__ = [
    "SWEEP_COST",
    "Fitted",
    "append_observations",
    "blas_threads",
    "check_backtest_limits",
    "check_model_limits",
    "check_output_limits",
    "fan_chart",
    "fit_model",
    "forecast_answer",
    "frame_from_spec",
    "gibbs_work",
    "inline_cost",
    "lead_time_totals",
    "simulate_forecast",
    "limit_blas_threads",
    "model_params",
    "run_forecast",
    "stored_settings",
]

Progress = Callable[[int, int], None]


class Fitted(NamedTuple):
    """A fitted model and the seed of its Gibbs chains (None for exact samplers)."""

    model: FanfoldVAR
    seed: int | None


def frame_from_spec(spec: SeriesData) -> pd.DataFrame:
    """The series of a JSON request as a DataFrame on its dates."""
    lengths = {name: len(values) for name, values in spec.series.items()}
    if len(set(lengths.values())) > 1:
        longest = max(lengths, key=lengths.__getitem__)
        shortest = min(lengths, key=lengths.__getitem__)
        raise DataError(
            f"series have different lengths ({shortest!r}: {lengths[shortest]}, "
            f"{longest!r}: {lengths[longest]}); send one value per period for every series"
        )
    T = next(iter(lengths.values()))
    index: pd.DatetimeIndex | None = None
    if spec.dates is not None:
        if spec.start is not None or spec.frequency is not None:
            raise DataError("give either dates, or start and frequency, not both")
        if len(spec.dates) != T:
            raise DataError(f"{len(spec.dates)} dates for {T} values per series")
        index = pd.DatetimeIndex(pd.to_datetime(spec.dates), name="date")
        calendar_from_index(index)  # at the door: duplicates, gaps, dates out of range
    elif spec.start is not None:
        if spec.frequency is None:
            raise DataError("give the frequency of the dates with start, e.g. 'MS' (monthly)")
        try:
            index = regular_dates(spec.start, T, spec.frequency, name="date")
        except DateRangeError as exc:
            raise DateRangeError(str(exc), "start") from exc
        except ValueError as exc:
            raise TimeIndexError(
                f"unknown frequency {spec.frequency!r}; use a pandas "
                "frequency such as MS, QS, W or D"
            ) from exc
    elif spec.frequency is not None:
        raise DataError("give start together with frequency")
    # one float array (null -> NaN), a tenth of the cost of pandas reading the lists
    values = np.array(list(spec.series.values()), dtype=np.float64).reshape(len(lengths), T)
    return pd.DataFrame(values.T, columns=list(spec.series), index=index, copy=False)


def _over(field: str, value: int, limit: int, advice: str) -> None:
    if value > limit:
        raise LimitExceeded(
            field, f"{field}: {value} is over this server's limit of {limit}; {advice}"
        )


def _lags_and_terms(spec: ModelSettings) -> tuple[int, int]:
    """The largest lag order the fit may use and the deterministic terms per equation."""
    p = spec.lags if isinstance(spec.lags, int) else (spec.max_lags or default_max_lags("monthly"))
    seasonal = spec.seasonal is True or spec.seasonal == "auto"  # 'auto' may choose them
    return p, int(spec.constant) + int(spec.trend) + (11 if seasonal else 0)


def _fits(spec: ModelSettings, n: int, p: int) -> int:
    """About how many fits the automatic configuration makes: per structure (seasonal
    or not, levels or logs) one per lag order, one flip per series, and a joint tuning
    of the dummy weights worth a few dozen fits (see priors.autoconfig)."""
    structures = (1 + (spec.seasonal == "auto")) * (1 + (spec.transforms == "auto"))
    lag_orders = p if spec.lags == "auto" else 1
    flips = n if spec.transforms == "auto" else 0
    dummies = 40 if "auto" in (spec.sum_coef, spec.initial) else 0
    return structures * lag_orders + flips + dummies + 1


def inline_cost(spec: ForecastSettings, n: int, T: int) -> float:
    """Rough flops of a conjugate one-shot forecast, for choosing where it runs: the fits
    (T k^2 each, :func:`_fits`) plus the simulation (draws x horizon x (k + n) x n).
    About 1e6 is 5 ms on one core (n=3, p=4, T=120, 1000 draws, 12 steps)."""
    p, m = _lags_and_terms(spec)
    k = n * p + m
    return float(_fits(spec, n, p) * T * k * k + spec.draws * spec.horizon * (k + n) * n)


# A chain-sweep's fixed cost in units of n k^2 (one unit took about 1 ns at n = 20,
# k = 261; a chain-sweep of a one-series model 25-160 us), so that long runs of tiny
# models count too.
SWEEP_COST = 50_000


def gibbs_work(spec: ModelSettings, n: int) -> tuple[float, str]:
    """The Gibbs sampler's work, chains x (burn + keep x thin) x (n x k**2 + SWEEP_COST)
    (k coefficients per equation at the largest lag order), and the setting that drives
    it most; (0, "") for the exact samplers."""
    if not spec.uses_gibbs:
        return 0.0, ""
    p, m = _lags_and_terms(spec)
    k = n * p + m
    field = "burn" if spec.burn > spec.keep * spec.thin else "keep"
    sweeps = spec.chains * (spec.burn + spec.keep * spec.thin)
    # stochastic volatility: one QR of the reweighted data per sweep, ~ T (k + n)^2,
    # counted with T = 20 k (measured 12 ms per sweep at n = 20, k = 261, T = 400)
    per_sweep = n * k * k if spec.prior == "independent" else 20 * k * (k + n) ** 2
    return float(sweeps * (per_sweep + SWEEP_COST)), field


def check_model_limits(spec: ModelSettings, n: int, T: int, limits: Settings) -> None:
    """Raise :class:`LimitExceeded` (422) naming the first model limit the data exceed."""
    p, m = _lags_and_terms(spec)
    _over("series", n, limits.max_series, "send fewer series")
    _over("series", T, limits.max_observations, "send fewer observations per series")
    _over("lags", p, limits.max_lags, "lower lags or max_lags")
    _over(
        "lags",
        n * (n * p + m),
        limits.max_coefficients,
        "lower lags or send fewer series (coefficients = series x (series x lags + terms))",
    )
    if not spec.uses_gibbs:
        return
    work, field = gibbs_work(spec, n)
    if work > limits.max_gibbs_work:
        raise LimitExceeded(field, (
            f"{field}: the Gibbs sampler's work, chains x (burn + keep x thin) x (series x "
            f"coefficients per equation^2 + {SWEEP_COST}) = {work:.3g}, is over this "
            f"server's limit of {limits.max_gibbs_work:.3g}; lower keep, thin, burn or "
            "chains (or lags)"))
    k = n * p + m
    stored = spec.chains * spec.keep * (k * n + n * n)
    if stored > limits.max_stored_draws:
        raise LimitExceeded("keep", (
            f"keep: the draws to store, chains x keep x (coefficients + series^2) = "
            f"{stored} values, are over this server's limit of {limits.max_stored_draws}; "
            "lower keep or chains (raise thin to keep the chains as long)"))


def check_backtest_limits(spec: BacktestCreate, n: int, T: int, limits: Settings) -> None:
    """The model limits, plus the Gibbs work of every origin's refit together."""
    check_model_limits(spec, n, T, limits)
    work, _ = gibbs_work(spec, n)
    if work * spec.origins > limits.max_gibbs_work:
        raise LimitExceeded("origins", (
            f"origins: refitting the Gibbs sampler at {spec.origins} origins is "
            f"{work * spec.origins:.3g} units of work, over this server's limit of "
            f"{limits.max_gibbs_work:.3g}; lower origins, keep, burn or chains"))


def check_output_limits(*, horizon: int, draws: int, n: int, limits: Settings,
                        quantiles: int = 0, horizon_field: str = "horizon",
                        horizon_what: str = "horizon") -> None:
    """Raise :class:`LimitExceeded` (422) naming the first output limit exceeded.

    ``horizon`` is the number of steps simulated; a route whose steps come from other
    fields (replenishment: start + lead_time + review_period) names them in
    ``horizon_field`` and ``horizon_what``.
    """
    _over("draws", draws, limits.max_draws, "lower draws")
    if horizon > limits.max_horizon:
        raise LimitExceeded(horizon_field, (
            f"{horizon_field}: {horizon_what} = {horizon} steps ahead is over this server's "
            f"limit of {limits.max_horizon}; ask for fewer steps"
            if horizon_what != "horizon" else
            f"horizon: {horizon} is over this server's limit of {limits.max_horizon}; "
            "lower horizon"))
    _over("quantiles", quantiles, limits.max_quantiles, "ask for fewer quantiles")
    _over(
        "draws",
        draws * horizon * n,
        limits.max_path_values,
        f"lower draws or {horizon_field} (draws x steps x series)",
    )


def limit_blas_threads(limit: int) -> None:
    """Limit BLAS threads for the rest of the process (0 = the libraries' default).

    The service calls this once at start-up: per-request limits cost milliseconds
    (threadpoolctl scans the loaded libraries) and concurrent requests would undo each
    other's limits.
    """
    if limit == 0:
        return
    import scipy.linalg  # noqa: F401 - load scipy's own BLAS so the limit reaches it
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=limit, user_api="blas")


@contextlib.contextmanager
def blas_threads(limit: int):  # type: ignore[no-untyped-def]
    """Limit BLAS threads for the block (0 = leave the libraries' default)."""
    if limit == 0:
        yield
        return
    import scipy.linalg  # noqa: F401 - load scipy's own BLAS so the limit reaches it
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=limit, user_api="blas"):
        yield


def model_params(spec: ModelSettings) -> dict[str, Any]:
    """FanfoldVAR's settings from a request; the Gibbs settings only for the independent
    prior, with one worker process (the server's parallelism is its job threads)."""
    params: dict[str, Any] = {
        "lags": spec.lags,
        "max_lags": spec.max_lags,
        "prior": spec.prior,
        "tightness": spec.tightness,
        "decay": spec.decay,
        "sum_coef": spec.sum_coef,
        "initial": spec.initial,
        "season_scale": spec.season_scale,
        "hyperprior": spec.hyperprior,
        "constant": spec.constant,
        "trend": spec.trend,
        "seasonal": spec.seasonal,
        "transforms": spec.transforms,
        "counts": spec.counts,
    }
    if spec.prior == "independent":
        params.update(cross=spec.cross)
        if spec.outliers:
            params["outliers"] = [[o.start.isoformat(), o.periods] for o in spec.outliers]
        if spec.sample_hyper:
            params["sample_hyper"] = True
    if spec.volatility != "constant":
        params["volatility"] = spec.volatility
    if spec.uses_gibbs:
        params.update(chains=spec.chains, burn=spec.burn, keep=spec.keep, thin=spec.thin,
                      workers=1)
    return params


def stored_settings(model: FanfoldVAR, seed: int | None) -> dict[str, Any]:
    """The settings kept with a model: its settings with every automatic choice written
    out (:meth:`FanfoldVAR.resolved_params`, so that restoring it needs no search), the
    report of what was chosen and why (``configuration``), and the seed that produced
    its Gibbs draws (none for exact samplers)."""
    params: dict[str, Any] = {k: v for k, v in model.resolved_params().items()
                              if v is not None or k in _NULLABLE}
    if model.configuration_ is not None and model.configuration_.chosen:
        params["configuration"] = model.configuration_.to_dict(model.series_.names)
    return params if seed is None else {**params, "seed": seed}


#: settings whose null means something (off), kept in the stored settings
_NULLABLE = ("sum_coef", "initial", "season_scale", "transforms")


def _fresh_seed(seed: int | None) -> int:
    return secrets.randbits(32) if seed is None else int(seed)


def fit_model(spec: ModelSettings, frame: pd.DataFrame, limits: Settings,
              progress: Progress | None = None) -> Fitted:
    """Check the limits, then fit. The independent prior's Gibbs chains start from
    ``spec.seed`` (or a fresh seed, returned so it can be stored); ``progress(done,
    total)`` is called as they run and may raise to stop the fit."""
    check_model_limits(spec, frame.shape[1], frame.shape[0], limits)
    model = FanfoldVAR(**model_params(spec))
    if not spec.uses_gibbs:
        return Fitted(model.fit(frame), None)
    seed = _fresh_seed(spec.seed)
    return Fitted(model.fit(frame, rng=np.random.default_rng(seed), progress=progress), seed)


def append_observations(model: FanfoldVAR, old: pd.DataFrame, new: pd.DataFrame, *,
                        seed: int | None = None, progress: Progress | None = None,
                        ) -> tuple[Fitted, pd.DataFrame]:
    """``model`` (fitted to ``old``) with the periods in ``new`` appended, and the data
    it is now fitted to (incomplete last periods of ``old`` are replaced). Exact update for
    the conjugate priors; the independent prior's chains run again from ``seed`` (or a
    fresh one)."""
    known = 0 if model.ragged_ is None else model.ragged_.values.shape[0]
    frame = pd.concat([old.iloc[: old.shape[0] - known], new])
    if not model.uses_gibbs:
        return Fitted(model.append(new), None), frame
    seed = _fresh_seed(seed)
    grown = model.append(new, rng=np.random.default_rng(seed), progress=progress)
    return Fitted(grown, seed), frame


def simulate_forecast(model: FanfoldVAR, *, horizon: int, draws: int, seed: int,
                      reject_explosive: bool, lead_time: int | None,
                      quantiles: Sequence[float], cumulative: bool,
                      ) -> tuple[Forecast, dict[str, Any] | None]:
    """The forecast (running totals with ``cumulative``) and, with ``lead_time``, the
    lead-time totals counted from the first period after any incomplete ones."""
    fc = model.forecast(horizon, rng=np.random.default_rng(seed), draws=draws,
                        reject_explosive=reject_explosive)
    totals = None
    if lead_time is not None:
        known = 0 if model.ragged_ is None else model.ragged_.values.shape[0]
        totals = lead_time_totals(fc, lead_time, quantiles, first=known + 1)
    return (fc.cumulative() if cumulative else fc), totals


def forecast_answer(model: FanfoldVAR, spec: OutputSettings, limits: Settings) -> dict[str, Any]:
    """Forecast from a fitted model; the answer in the layout of :func:`forecast_to_dict`."""
    check_output_limits(horizon=spec.horizon, draws=spec.draws, quantiles=len(spec.quantiles),
                        n=model.design_.n, limits=limits)
    seed = secrets.randbits(32) if spec.seed is None else spec.seed
    fc, totals = simulate_forecast(
        model, horizon=spec.horizon, draws=spec.draws, seed=seed,
        reject_explosive=spec.reject_explosive, lead_time=spec.lead_time,
        quantiles=spec.quantiles, cumulative=spec.cumulative)
    payload = forecast_to_dict(model, fc, quantiles=spec.quantiles, seed=seed, draws=spec.draws)
    payload["cumulative"] = spec.cumulative
    payload["lead_time_totals"] = totals
    return payload


def lead_time_totals(fc: Forecast, lead_time: int, quantiles: Sequence[float],
                     first: int = 1) -> dict[str, Any]:
    """Mean, median and quantiles of each series' total over ``lead_time`` steps from
    step ``first``, path by path."""
    if first - 1 + lead_time > fc.horizon:
        raise SpecificationError(f"lead_time {lead_time} is longer than the horizon "
                                 f"{fc.horizon - first + 1}; raise the horizon")
    tot = window_totals(fc.paths, first, first - 1 + lead_time)  # (S, n)
    qs = np.quantile(tot, quantiles, axis=0)
    return {name: {"mean": float(tot[:, j].mean()), "median": float(np.median(tot[:, j])),
                   "quantiles": {quantile_key(q): float(qs[i, j])
                                 for i, q in enumerate(quantiles)}}
            for j, name in enumerate(fc.names)}


def run_forecast(spec: ForecastSettings, frame: pd.DataFrame, limits: Settings) -> dict[str, Any]:
    """One-shot: check every limit first, then fit and forecast. One seed (given or
    fresh, reported in the answer) drives both the Gibbs chains and the forecast draws."""
    check_model_limits(spec, frame.shape[1], frame.shape[0], limits)
    check_output_limits(horizon=spec.horizon, draws=spec.draws, quantiles=len(spec.quantiles),
                        n=frame.shape[1], limits=limits)
    work, field = gibbs_work(spec, frame.shape[1])
    if work > limits.sync_max_gibbs_work:
        raise LimitExceeded(field, (
            f"{field}: this Gibbs fit (work {work:.3g}) is too large to answer at once "
            f"(over {limits.sync_max_gibbs_work:.3g}); store the model with POST /v1/models "
            "(which runs as a job) and forecast it with POST /v1/models/{id}/forecasts, or "
            "lower keep, thin, burn or chains"))
    spec = spec.model_copy(update={"seed": _fresh_seed(spec.seed)})
    return forecast_answer(fit_model(spec, frame, limits).model, spec, limits)


def fan_chart(
    model: FanfoldVAR,
    *,
    horizon: int,
    bands: list[float],
    draws: int,
    seed: int,
    history: int,
    limits: Settings,
) -> dict[str, Any]:
    """Nested central bands, the median and the last ``history`` observations."""
    check_output_limits(horizon=horizon, draws=draws, n=model.design_.n, limits=limits)
    fc = model.forecast(horizon, rng=np.random.default_rng(seed), draws=draws)
    median, band = fc.median(), fc.bands(bands)
    levels = model.series_.levels[-history:]
    index = model.series_.calendar.index
    past = (
        [d.date().isoformat() for d in index[-history:]]
        if index is not None
        else [str(i) for i in range(-len(levels) + 1, 1)]
    )
    names = model.series_.names
    return {
        "history": {
            "dates": past,
            "values": {nm: levels[:, j].tolist() for j, nm in enumerate(names)},
        },
        "dates": fc.steps(),
        "median": {nm: median[:, j].tolist() for j, nm in enumerate(names)},
        "bands": {
            format(c, "g"): {
                nm: {"lower": b[0, :, j].tolist(), "upper": b[1, :, j].tolist()}
                for j, nm in enumerate(names)
            }
            for c, b in band.items()
        },
    }
