"""The bridge from request specs to :mod:`priors`: data frames, limits, forecasts.

Pure functions of (spec, settings); the routes call them in a worker thread.
"""

from __future__ import annotations

import contextlib
import secrets
from typing import Any

import numpy as np
import pandas as pd

from priors import DataError, FanfoldVAR, TimeIndexError
from priors.model import default_max_lags

from .config import Settings
from .errors import LimitExceeded
from .schemas import ForecastCreate, ForecastSettings
from .serialization import forecast_to_dict

__all__ = ["blas_threads", "check_limits", "frame_from_spec", "run_forecast"]


def frame_from_spec(spec: ForecastCreate) -> pd.DataFrame:
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
    frame = pd.DataFrame(spec.series)
    if spec.dates is not None:
        if spec.start is not None or spec.frequency is not None:
            raise DataError("give either dates, or start and frequency, not both")
        if len(spec.dates) != T:
            raise DataError(f"{len(spec.dates)} dates for {T} values per series")
        frame.index = pd.DatetimeIndex(pd.to_datetime(spec.dates), name="date")
    elif spec.start is not None:
        if spec.frequency is None:
            raise DataError("give the frequency of the dates with start, e.g. 'MS' (monthly)")
        try:
            frame.index = pd.date_range(spec.start, periods=T, freq=spec.frequency, name="date")
        except ValueError as exc:
            raise TimeIndexError(
                f"unknown frequency {spec.frequency!r}; use a pandas "
                "frequency such as MS, QS, W or D"
            ) from exc
    elif spec.frequency is not None:
        raise DataError("give start together with frequency")
    return frame


def check_limits(
    settings: ForecastSettings, n: int, T: int, m_guess: int, limits: Settings
) -> None:
    """Raise :class:`LimitExceeded` (422) naming the first limit the request exceeds."""
    p = (
        settings.lags
        if isinstance(settings.lags, int)
        else (settings.max_lags or default_max_lags("monthly"))
    )
    checks = [
        ("series", n, limits.max_series, "send fewer series"),
        ("series", T, limits.max_observations, "send fewer observations per series"),
        ("lags", p, limits.max_lags, "lower lags or max_lags"),
        ("draws", settings.draws, limits.max_draws, "lower draws"),
        ("horizon", settings.horizon, limits.max_horizon, "lower horizon"),
        ("quantiles", len(settings.quantiles), limits.max_quantiles, "ask for fewer quantiles"),
        (
            "lags",
            n * (n * p + m_guess),
            limits.max_coefficients,
            "lower lags or send fewer series (coefficients = series x (series x lags + terms))",
        ),
        (
            "draws",
            settings.draws * settings.horizon * n,
            limits.max_path_values,
            "lower draws or horizon (draws x horizon x series)",
        ),
    ]
    for field, value, limit, advice in checks:
        if value > limit:
            raise LimitExceeded(
                field, f"{field}: {value} is over this server's limit of {limit}; {advice}"
            )


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


def run_forecast(spec: ForecastSettings, frame: pd.DataFrame, limits: Settings) -> dict[str, Any]:
    """Fit and forecast; the answer in the layout of :func:`forecast_to_dict`."""
    m_guess = int(spec.constant) + int(spec.trend) + (11 if spec.seasonal else 0)
    check_limits(spec, frame.shape[1], frame.shape[0], m_guess, limits)
    seed = secrets.randbits(32) if spec.seed is None else spec.seed
    model = FanfoldVAR(
        lags=spec.lags,
        max_lags=spec.max_lags,
        prior=spec.prior,
        tightness=spec.tightness,
        decay=spec.decay,
        sum_coef=spec.sum_coef,
        initial=spec.initial,
        hyperprior=spec.hyperprior,
        constant=spec.constant,
        trend=spec.trend,
        seasonal=spec.seasonal,
        transforms=spec.transforms,
    )

    with blas_threads(limits.blas_threads):
        model.fit(frame)
        fc = model.forecast(
            spec.horizon,
            rng=np.random.default_rng(seed),
            draws=spec.draws,
            reject_explosive=spec.reject_explosive,
        )
    if spec.cumulative:
        fc = fc.cumulative()
    payload = forecast_to_dict(model, fc, quantiles=spec.quantiles, seed=seed, draws=spec.draws)
    payload["cumulative"] = spec.cumulative
    return payload
