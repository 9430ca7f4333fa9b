"""A batch as a background job of the HTTP service: request -> groups -> results JSON.

:func:`prepare` checks a request at once (the route answers 422 for what it finds);
:func:`run` does the work in a job thread and returns what the job row keeps
(``result``): a summary, the status table and the forecast table, by column.
"""

from __future__ import annotations

import contextlib
import secrets
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd
from distributed import Client

from ..compute.engine import model_params
from ..compute.limits import check_output_limits
from ..config import Settings
from ..errors import LimitExceeded
from .output import forecast_frame, status_frame
from .runner import batch_client, dask_security, run_batch
from .schemas import BatchCreate
from .table import Columns, Groups, split_groups
from .worker import ForecastSpec

__all__ = ["prepare", "run"]


def _columns(spec: BatchCreate) -> Columns:
    return Columns(tuple(spec.group_by), spec.date_column, spec.series_column,
                   spec.value_column)


def prepare(spec: BatchCreate, settings: Settings) -> Groups:
    """The groups of the request, after the table checks (:class:`TableError`) and the
    server's limits (:class:`LimitExceeded`)."""
    groups = split_groups(pd.DataFrame(spec.table), _columns(spec))
    count = len(groups.groups) + len(groups.rejected)
    if count > settings.max_batch_groups:
        raise LimitExceeded("group_by", f"group_by: {count} groups is over this server's "
                            f"limit of {settings.max_batch_groups} per batch; split the table")
    widest = max((len(g.names) for g in groups.groups), default=1)
    check_output_limits(horizon=spec.horizon, draws=spec.draws, n=widest, limits=settings,
                        quantiles=len(spec.quantiles))
    return groups


def run(payload: dict[str, Any], settings: Settings,
        progress: Callable[[int, int], None] | None = None,
        client: Client | None = None) -> dict[str, Any]:
    """Run the batch of a stored request on ``client``'s cluster (None: connect as the
    settings say, for this batch only); the results the job keeps."""
    spec = BatchCreate.model_validate(payload)
    seed = secrets.randbits(32) if spec.seed is None else spec.seed
    groups = prepare(spec, settings)
    forecast = ForecastSpec(model_params(spec), spec.horizon, spec.draws,
                            tuple(spec.quantiles), seed, settings.blas_threads)
    with contextlib.ExitStack() as stack:
        if client is None:
            security = dask_security(ca_file=settings.dask_tls_ca_file,
                                     cert_file=settings.dask_tls_cert_file,
                                     key_file=settings.dask_tls_key_file)
            client = stack.enter_context(batch_client(
                address=settings.dask_address, security=security,
                workers=settings.dask_workers, processes=settings.dask_processes))
        done = run_batch(client, groups.groups, forecast, chunk_size=settings.batch_chunk_size,
                         retries=settings.batch_retries, progress=progress)
    outcomes = sorted(done + groups.rejected, key=lambda g: g.key)
    keys = list(spec.group_by)
    status = status_frame(outcomes, keys)
    table = forecast_frame(outcomes, keys, spec.quantiles)
    table["date"] = table["date"].dt.strftime("%Y-%m-%d")
    ok = int((status["status"] == "ok").sum())
    return {"groups": len(outcomes), "succeeded": ok, "failed": len(outcomes) - ok,
            "seed": seed, "group_by": keys, "quantiles": list(spec.quantiles),
            "horizon": spec.horizon, "draws": spec.draws,
            "status": _columnar(status), "forecasts": _columnar(table)}


def _columnar(frame: pd.DataFrame) -> dict[str, list[Any]]:
    """A table as JSON-ready columns (missing values -> null)."""
    out = {}
    for name in frame.columns:
        col = frame[name].astype(object).where(frame[name].notna(), None)
        out[str(name)] = [v.item() if isinstance(v, np.generic) else v for v in col]
    return out
