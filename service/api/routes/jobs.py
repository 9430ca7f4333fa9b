"""``/v1/jobs/{id}``: poll a background job, or cancel it."""

from __future__ import annotations

import uuid
from typing import Any

from fastapi import APIRouter, Request
from starlette.exceptions import HTTPException

from ...errors import PROBLEM_JSON
from ...jobs import TERMINAL, cancel_job, get_job
from ...orm import Job
from ...responses import JSONResponse
from ...schemas import JobPublic
from ..deps import SessionDep, TenantDep
from ..json_body import JSONBodyRoute

router = APIRouter(prefix="/v1/jobs", tags=["jobs"], route_class=JSONBodyRoute)

_NOT_FOUND = {404: {"description": "no such job for this caller",
                    "content": {PROBLEM_JSON: {}}}}


def job_public(job: Job) -> dict[str, Any]:
    return JobPublic(
        id=job.id, kind=job.kind, status=job.status, progress=job.progress,  # type: ignore[arg-type]
        attempts=job.attempts, created_at=job.created_at, updated_at=job.updated_at,
        result=_result_link(job),
        problem=job.error,
    ).model_dump(mode="json")


def _result_link(job: Job) -> str | None:
    if job.result_model_id:
        return f"/v1/models/{job.result_model_id}"
    if job.status != "succeeded":
        return None
    return {"backtest": f"/v1/backtests/{job.id}",
            "batch": f"/v1/batches/{job.id}/results"}.get(job.kind)


def _job_or_404(session: Any, tenant: str, job_id: uuid.UUID) -> Job:
    job = get_job(session=session, tenant=tenant, job_id=str(job_id))
    if job is None:
        raise HTTPException(404, f"job {job_id} not found")
    return job


@router.get("/{job_id}", response_model=JobPublic, responses=_NOT_FOUND,
            summary="State and progress of a job; a link to its result when done")
def read_job(job_id: uuid.UUID, session: SessionDep, tenant: TenantDep) -> JSONResponse:
    job = _job_or_404(session, tenant, job_id)
    headers = {"Cache-Control": "no-store"}
    if job.status not in TERMINAL:
        headers["Retry-After"] = "1"
    return JSONResponse(job_public(job), headers=headers)


@router.delete("/{job_id}", response_model=JobPublic, status_code=202,
               responses={**_NOT_FOUND, 409: {"description": "the job already finished",
                                              "content": {PROBLEM_JSON: {}}}},
               summary="Cancel a job (queued: at once; running: a Gibbs fit stops at its "
                       "next progress report, any job before storing)")
def delete_job(job_id: uuid.UUID, request: Request, session: SessionDep,
               tenant: TenantDep) -> JSONResponse:
    job = _job_or_404(session, tenant, job_id)
    if job.status in TERMINAL:
        raise HTTPException(409, f"job {job_id} already {job.status}")
    return JSONResponse(job_public(cancel_job(session=session, job=job)), status_code=202)
