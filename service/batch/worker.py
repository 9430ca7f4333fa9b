"""The work of one task: fit and forecast each group of a chunk, on a Dask worker.

Pure functions of plain data: a group arrives as float64 values, datetime64 dates and
labels (:class:`GroupArrays`), the settings as a :class:`ForecastSpec`, and what comes
back is arrays and strings again (:class:`GroupForecast`), never a model or a DataFrame.
A group that cannot be forecast (too short, constant, gaps, ...) comes back with its
error's type and message; the other groups of its chunk go on.

Randomness: every group draws from its own :func:`group_seed`, derived from the batch
seed and the group's key alone, so a group's forecast is the same whether it runs in a
batch of ten thousand, in another chunk, on another worker, or by itself.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import time
from collections.abc import Iterator, Mapping, Sequence
from typing import Any, NamedTuple

import numpy as np
import pandas as pd

from priors import FanfoldVAR
from priors._types import FloatArray

__all__ = ["ForecastSpec", "GroupArrays", "GroupForecast", "failed", "forecast_chunk",
           "forecast_group", "group_seed"]


class GroupArrays(NamedTuple):
    """One group's data: ``values`` (T, n) float64 (NaN where missing) on ``dates`` (T,)
    datetime64[ns], columns named ``names``; ``key`` is the group's labels."""

    key: tuple[str, ...]
    dates: np.ndarray
    names: tuple[str, ...]
    values: FloatArray


class ForecastSpec(NamedTuple):
    """What every group of a batch gets: FanfoldVAR's settings (``params``), the horizon,
    paths and quantile levels of the forecast, the batch seed and BLAS threads per task
    (0 = the libraries' default)."""

    params: Mapping[str, Any]
    horizon: int
    draws: int
    quantiles: tuple[float, ...]
    seed: int
    blas_threads: int = 1


class GroupForecast(NamedTuple):
    """One group's outcome. Succeeded: ``error_type`` is None, ``dates`` (h,) the forecast
    periods (datetime64[ns]), ``mean`` (h, n) and ``quantiles`` (levels, h, n). Failed:
    ``error_type`` and ``error`` say why, the arrays are None."""

    key: tuple[str, ...]
    names: tuple[str, ...]
    periods: int
    error_type: str | None = None
    error: str | None = None
    lags: int | None = None
    dates: np.ndarray | None = None
    mean: FloatArray | None = None
    quantiles: FloatArray | None = None
    seconds: float = 0.0

    @property
    def ok(self) -> bool:
        return self.error_type is None


def group_seed(batch_seed: int, key: Sequence[str]) -> np.random.SeedSequence:
    """The seed of one group: the batch seed and a SHA-256 of the key's labels (JSON, so
    ("a", "bc") and ("ab", "c") differ). Not Python's ``hash()``, which changes between
    processes."""
    digest = hashlib.sha256(json.dumps(list(key), ensure_ascii=False).encode()).digest()
    words = np.frombuffer(digest[:16], dtype="<u4").tolist()
    return np.random.SeedSequence([int(batch_seed), *words])


def failed(group: GroupArrays, error_type: str, error: str) -> GroupForecast:
    """The outcome of a group that was not forecast."""
    return GroupForecast(group.key, group.names, int(group.values.shape[0]),
                         error_type=error_type, error=" ".join(error.split()))


def forecast_group(group: GroupArrays, spec: ForecastSpec) -> GroupForecast:
    """Fit FanfoldVAR to one group and forecast it; an exception becomes a failed
    outcome naming its type (the batch goes on)."""
    started = time.perf_counter()
    fit_seed, draw_seed = group_seed(spec.seed, group.key).spawn(2)
    try:
        frame = pd.DataFrame(group.values, columns=list(group.names),
                             index=pd.DatetimeIndex(group.dates, name="date"))
        # one process per task: Gibbs chains never spawn processes of their own here
        model = FanfoldVAR(**{**spec.params, "workers": 1})
        # advice (short history, negative values) stays in warnings_: no warning filters
        if model.uses_gibbs:
            model.fit(frame, rng=np.random.default_rng(fit_seed), warn=False)
        else:
            model.fit(frame, warn=False)
        fc = model.forecast(spec.horizon, rng=np.random.default_rng(draw_seed),
                            draws=spec.draws)
        quantiles = fc.quantiles(spec.quantiles)
        mean = fc.mean()
    except Exception as exc:  # one group's failure, reported with the group
        return failed(group, type(exc).__name__, str(exc) or repr(exc))._replace(
            seconds=time.perf_counter() - started)
    assert fc.dates is not None  # the frame has dates
    return GroupForecast(group.key, group.names, int(group.values.shape[0]),
                         lags=int(model.lags_),
                         dates=fc.dates.to_numpy(dtype="datetime64[ns]"), mean=mean,
                         quantiles=quantiles, seconds=time.perf_counter() - started)


@contextlib.contextmanager
def _blas(threads: int) -> Iterator[None]:
    if threads <= 0:
        yield
        return
    import scipy.linalg  # noqa: F401 - load scipy's own BLAS so the limit reaches it
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=threads, user_api="blas"):
        yield


def forecast_chunk(chunk: Sequence[GroupArrays], spec: ForecastSpec) -> list[GroupForecast]:
    """The task sent to a worker: :func:`forecast_group` for each group, in order."""
    with _blas(spec.blas_threads):
        return [forecast_group(group, spec) for group in chunk]
