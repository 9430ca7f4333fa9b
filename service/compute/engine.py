"""The bridge from request specs to :mod:`priors`: data frames, fits, forecasts.

Limits and cost estimates are in :mod:`service.compute.limits`.

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
from priors.calendar import calendar_from_index, check_date_range, regular_dates
from priors.inventory import window_totals

from ..config import Settings
from ..errors import LimitExceeded
from ..schemas import ForecastSettings, ModelSettings, OutputSettings, SeriesData
from ..serialization import convergence_summary, forecast_to_dict, quantile_key
from .limits import (
    Admission,
    Shape,
    admit_forecast,
    check_model_limits,
    check_output_limits,
    fit_seconds,
    forecast_seconds,
    gibbs_work,
    lags_and_terms,
)

__all__ = [
    "Fitted",
    "append_observations",
    "blas_threads",
    "fan_chart",
    "fit_model",
    "forecast_answer",
    "frame_from_spec",
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
        # at the door: dates out of range, duplicates, gaps (a spacing needs 3 dates; one
        # or two new periods are checked against the model's calendar when appended)
        check_date_range(index.min(), index.max())
        if len(index) >= 3:
            calendar_from_index(index)
    elif spec.start is not None:
        if spec.frequency is None:
            raise DataError("give the frequency of the dates with start, e.g. 'MS' (monthly)")
        try:
            index = regular_dates(spec.start, T, spec.frequency, name="date")
        except DateRangeError as exc:
            raise DateRangeError(str(exc), "start") from exc
        except TimeIndexError:
            raise  # an unknown or sub-daily frequency, named as such
        except ValueError as exc:  # anything else pandas refuses about the spacing
            raise TimeIndexError(f"cannot build dates of frequency {spec.frequency!r} from "
                                 f"{spec.start}: {exc}", "frequency") from exc
    elif spec.frequency is not None:
        raise DataError("give start together with frequency")
    # one float array (null -> NaN), a tenth of the cost of pandas reading the lists
    values = np.array(list(spec.series.values()), dtype=np.float64).reshape(len(lengths), T)
    return pd.DataFrame(values.T, columns=list(spec.series), index=index, copy=False)


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
    # advice about the data goes into the answer (model.warnings_), not through Python's
    # warning machinery, whose filters are process-wide
    if not spec.uses_gibbs:
        return Fitted(model.fit(frame, warn=False), None)
    seed = _fresh_seed(spec.seed)
    return Fitted(model.fit(frame, rng=np.random.default_rng(seed), progress=progress,
                            warn=False), seed)


def append_observations(model: FanfoldVAR, old: pd.DataFrame, new: pd.DataFrame, *,
                        seed: int | None = None, progress: Progress | None = None,
                        ) -> tuple[Fitted, pd.DataFrame]:
    """``model`` (fitted to ``old``) with the periods in ``new`` appended, and the data
    it is now fitted to (incomplete last periods of ``old`` are replaced). Exact update for
    the conjugate priors; the independent prior's chains run again from ``seed`` (or a
    fresh one)."""
    known = 0 if model.ragged_ is None else model.ragged_.values.shape[0]
    if isinstance(old.index, pd.DatetimeIndex):  # rows without dates continue the calendar
        new = model.on_calendar(new)
    elif isinstance(new.index, pd.DatetimeIndex):
        raise TimeIndexError("the model's data have no dates; send the new periods without "
                             "start, frequency or dates")
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


def forecast_answer(model: FanfoldVAR, spec: OutputSettings, limits: Settings, *,
                    admission: Admission | None = None,
                    convergence: dict[str, Any] | None = None) -> dict[str, Any]:
    """Forecast from a fitted model; the answer in the layout of :func:`forecast_to_dict`.
    ``convergence``: the sampled model's stored R-hat/ESS summary (computed when None)."""
    check_output_limits(horizon=spec.horizon, draws=spec.draws, quantiles=len(spec.quantiles),
                        n=model.design_.n, limits=limits)
    admit_forecast(admission, model, draws=spec.draws, horizon=spec.horizon)
    seed = secrets.randbits(32) if spec.seed is None else spec.seed
    fc, totals = simulate_forecast(
        model, horizon=spec.horizon, draws=spec.draws, seed=seed,
        reject_explosive=spec.reject_explosive, lead_time=spec.lead_time,
        quantiles=spec.quantiles, cumulative=spec.cumulative)
    if convergence is None:
        convergence = convergence_summary(model)
    payload = forecast_to_dict(model, fc, quantiles=spec.quantiles, seed=seed, draws=spec.draws,
                               convergence=convergence)
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


def run_forecast(spec: ForecastSettings, frame: pd.DataFrame, limits: Settings, *,
                 admission: Admission | None = None) -> dict[str, Any]:
    """One-shot: check every limit first, then fit and forecast. One seed (given or
    fresh, reported in the answer) drives both the Gibbs chains and the forecast draws."""
    T, n = frame.shape
    check_model_limits(spec, n, T, limits)
    check_output_limits(horizon=spec.horizon, draws=spec.draws, quantiles=len(spec.quantiles),
                        n=n, limits=limits)
    work, field = gibbs_work(spec, n, T)
    if work > limits.sync_max_gibbs_work:
        raise LimitExceeded(field, (
            f"{field}: this Gibbs fit (work {work:.3g}) is too large to answer at once "
            f"(over {limits.sync_max_gibbs_work:.3g}); store the model with POST /v1/models "
            "(which runs as a job) and forecast it with POST /v1/models/{id}/forecasts, or "
            "lower keep, thin, burn or chains"))
    if admission is not None:
        p, m = lags_and_terms(spec)
        fit_s = fit_seconds(spec, n, T)
        sim_s = forecast_seconds(Shape.of(n, p, m), draws=spec.draws, horizon=spec.horizon)
        field = (gibbs_work(spec, n, T)[1] or "lags") if fit_s > sim_s else "draws"
        admission.admit(fit_s + sim_s, field, "lower draws, horizon or lags (or keep and "
                        "burn); or store the model with POST /v1/models (large fits run "
                        "as jobs) and forecast it with POST /v1/models/{id}/forecasts")
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
    admission: Admission | None = None,
) -> dict[str, Any]:
    """Nested central bands, the median and the last ``history`` observations."""
    check_output_limits(horizon=horizon, draws=draws, n=model.design_.n, limits=limits)
    admit_forecast(admission, model, draws=draws, horizon=horizon)
    fc = model.forecast(horizon, rng=np.random.default_rng(seed), draws=draws)
    median, band = fc.median(), fc.bands(bands)
    first = max(model.series_.levels.shape[0] - history, 0)  # history=0: none ([-0:] is all)
    levels = model.series_.levels[first:]
    index = model.series_.calendar.index
    past = (
        [d.date().isoformat() for d in index[first:]]
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
