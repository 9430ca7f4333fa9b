"""``/v1/backtests``: rolling-origin evaluation as a background job."""

from __future__ import annotations

import uuid
from typing import Any

import pandas as pd
from fastapi import APIRouter, Request
from starlette.exceptions import HTTPException

from priors.calendar import calendar_from_index

from ...compute.engine import frame_from_spec
from ...compute.limits import check_backtest_limits
from ...errors import PROBLEM_JSON
from ...jobs import get_job, submit_job
from ...responses import JSONResponse
from ...schemas import BacktestCreate, JobPublic
from ..deps import SessionDep, SettingsDep, TenantDep
from ..json_body import JSONBodyRoute
from .jobs import job_public

router = APIRouter(prefix="/v1/backtests", tags=["backtests"], route_class=JSONBodyRoute)


@router.post("", status_code=202, response_model=JobPublic,
             responses={422: {"description": "invalid input or a limit exceeded",
                              "content": {PROBLEM_JSON: {}}}},
             summary="Start a rolling-origin backtest (a job; poll Location)",
             description="Refits the model at each of the last `origins` dates, forecasts "
                         "`horizon` steps and scores the forecasts against what happened, "
                         "beside the OLS VAR, a random walk and (with `period`) a seasonal "
                         "naive forecast. The scores are at /v1/backtests/{id} when the job "
                         "has succeeded.")
def create_backtest(body: BacktestCreate, request: Request, session: SessionDep,
                    settings: SettingsDep, tenant: TenantDep) -> JSONResponse:
    frame = frame_from_spec(body)
    check_backtest_limits(body, frame.shape[1], frame.shape[0], settings)
    if isinstance(frame.index, pd.DatetimeIndex):  # the last origin's forecast dates
        calendar_from_index(frame.index).future(body.horizon)
    if body.draws > settings.max_draws:
        raise HTTPException(422, f"draws: {body.draws} is over this server's limit of "
                                 f"{settings.max_draws}; lower draws")
    job = submit_job(session=session, tenant=tenant, kind="backtest", spec=body,
                     max_attempts=settings.job_max_attempts)
    request.app.state.jobs.wake()
    return JSONResponse(job_public(job), status_code=202,
                        headers={"Location": f"/v1/jobs/{job.id}", "Retry-After": "1"})


@router.get("/{job_id}", summary="Scores of a finished backtest",
            responses={404: {"description": "no such backtest for this caller",
                             "content": {PROBLEM_JSON: {}}},
                       409: {"description": "not finished yet; poll /v1/jobs/{id}",
                             "content": {PROBLEM_JSON: {}}}})
def read_backtest(job_id: uuid.UUID, session: SessionDep, tenant: TenantDep) -> dict[str, Any]:
    job = get_job(session=session, tenant=tenant, job_id=str(job_id))
    if job is None or job.kind != "backtest":
        raise HTTPException(404, f"backtest {job_id} not found")
    if job.status != "succeeded" or job.result is None:
        raise HTTPException(409, f"backtest {job_id} is {job.status}; poll /v1/jobs/{job_id}")
    return job.result
