"""What a job computes, as functions of plain data, wherever it runs.

A job thread of the service calls these directly (``FANFOLD_JOB_EXECUTOR=threads``) or
sends them to a Dask worker (``dask``, :mod:`service.jobs.cluster`); the answer is the
same. In: the stored request (JSON-ready dicts) and, for an update, the model's stored
columns; out: the columns of the model to store (:func:`service.store.model_columns`:
bytes, numbers and dicts) or the backtest's result document. Nothing here opens the
database, and ``limits`` is a copy of the settings without secrets
(:func:`worker_limits`), so a worker never holds the database URL or the API keys.

``progress(done, total)`` is called as the work goes (Gibbs sweeps, backtest origins) and
may raise to stop it.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import numpy as np

from ..compute.engine import (
    append_observations,
    fit_model,
    frame_from_spec,
    model_params,
    stored_settings,
)
from ..compute.limits import check_backtest_limits
from ..config import Settings
from ..schemas import BacktestCreate, ModelCreate, ObservationsCreate
from ..serialization import data_from_dict
from ..store import fitted_from_columns, model_columns

__all__ = ["REMOTE_KINDS", "Progress", "backtest_result", "fit_columns", "run_work",
           "update_columns", "worker_limits"]

Progress = Callable[[int, int], None]
#: the kinds a job thread can hand to a Dask worker (a batch is itself many Dask tasks)
REMOTE_KINDS = ("fit_model", "update_model", "backtest")
#: settings a worker must not see
_SECRETS = {"database_url": "", "api_keys": [], "dask_tls_key_file": "",
            "dask_tls_cert_file": "", "dask_tls_ca_file": "", "cors_origins": []}


def worker_limits(settings: Settings) -> Settings:
    """The settings a job's work needs (limits, time limit, BLAS threads) without the
    secrets: the database URL, API keys and TLS files are blanked."""
    return settings.model_copy(update=_SECRETS)


def fit_columns(request: dict[str, Any], limits: Settings,
                progress: Progress | None = None) -> dict[str, Any]:
    """Fit the model of a stored ``POST /v1/models`` request; its columns to store."""
    spec = ModelCreate.model_validate(request)
    frame = frame_from_spec(spec)
    fitted = fit_model(spec, frame, limits, progress=progress)
    return model_columns(fitted.model, frame, stored_settings(fitted.model, fitted.seed))


def update_columns(stored: dict[str, Any], request: dict[str, Any],
                   progress: Progress | None = None) -> dict[str, Any]:
    """The model stored as ``stored`` (its columns) with the observations of a stored
    ``POST /v1/models/{id}/observations`` request appended: the independent prior's
    chains run again from the stored seed. Lags and hyperparameters stay as stored."""
    spec = ObservationsCreate.model_validate(request)
    settings = stored["settings"]
    fitted, frame = append_observations(
        fitted_from_columns(stored), data_from_dict(stored["data"]), frame_from_spec(spec),
        seed=settings.get("seed"), progress=progress)
    if fitted.seed is not None:
        settings = {**settings, "seed": fitted.seed}
    return {**model_columns(fitted.model, frame, settings), "lags": stored["lags"],
            "hyperparameters": stored["hyperparameters"]}


def backtest_result(request: dict[str, Any], limits: Settings,
                    progress: Progress | None = None) -> dict[str, Any]:
    """Run the rolling-origin backtest of a stored ``POST /v1/backtests`` request; the
    result document the job keeps (progress counts origins)."""
    from priors.backtest import rolling_origin

    spec = BacktestCreate.model_validate(request)
    frame = frame_from_spec(spec)
    check_backtest_limits(spec, frame.shape[1], frame.shape[0], limits)
    benchmarks = ("ols_var", "random_walk") + (("seasonal_naive",) if spec.period else ())
    if spec.prior == "flat":
        benchmarks = tuple(b for b in benchmarks if b != "ols_var")
    result = rolling_origin(frame, params=model_params(spec), origins=spec.origins,
                            horizon=spec.horizon, window=spec.window, draws=spec.draws,
                            coverage=spec.coverage, period=spec.period,
                            benchmarks=benchmarks, rng=np.random.default_rng(spec.seed),
                            progress=progress)
    scores = result.scores().replace({np.nan: None}).to_dict(orient="records")
    logs = result.log_scores().replace({np.nan: None}).to_dict(orient="records")
    calibration = (result.pit_tests().replace({np.nan: None}).to_dict(orient="records")
                   if spec.origins >= 10 else [])
    return {"origins": spec.origins, "horizon": spec.horizon, "seed": spec.seed,
            "coverage": spec.coverage, "scores": scores, "log_scores": logs,
            "energy_scores": result.energy_scores().to_dict(orient="records"),
            "dm_tests": result.dm_tests().replace({np.nan: None}).to_dict(orient="records"),
            "calibration": calibration}


def run_work(kind: str, inputs: dict[str, Any], limits: Settings,
             progress: Progress | None = None) -> tuple[dict[str, Any], float]:
    """The work of a job of ``kind`` (one of :data:`REMOTE_KINDS`) on ``inputs``
    (``{"request": ...}``, plus ``"stored"``: the model's columns for an update); what
    it returns and the seconds it took."""
    started = time.perf_counter()
    if kind == "fit_model":
        out = fit_columns(inputs["request"], limits, progress)
    elif kind == "update_model":
        out = update_columns(inputs["stored"], inputs["request"], progress)
    elif kind == "backtest":
        out = backtest_result(inputs["request"], limits, progress)
    else:
        raise ValueError(f"no work function for jobs of kind {kind!r}")
    return out, time.perf_counter() - started
