"""``/v1/batches``: one model per group of a long table, as a job on dask.distributed."""

from __future__ import annotations

import hashlib
import io
import uuid
from typing import Annotated, Any, Literal

import pandas as pd
from fastapi import APIRouter, Header, Request, Response
from starlette.exceptions import HTTPException

from ...batch.job import prepare
from ...batch.schemas import BatchCreate
from ...batch.table import TableError
from ...errors import PROBLEM_JSON, InvalidField
from ...jobs import get_job, submit_job
from ...responses import JSONResponse
from ...schemas import JobPublic
from ...store import commit_or_winner, find_idempotent, remember_idempotent
from ..deps import SessionDep, SettingsDep, TenantDep
from ..json_body import JSONBodyRoute
from .jobs import job_public

router = APIRouter(prefix="/v1/batches", tags=["batches"], route_class=JSONBodyRoute)


@router.post("", status_code=202, response_model=JobPublic,
             responses={422: {"description": "invalid table or a limit exceeded",
                              "content": {PROBLEM_JSON: {}}}},
             summary="Forecast every group of a long table (a job; poll Location)",
             description="Fits one model per group (rows sharing the `group_by` labels) "
                         "and forecasts it, on the server's Dask cluster. The job's "
                         "progress counts groups; a group that cannot be forecast gets its "
                         "error in the results and the batch goes on. Results: "
                         "/v1/batches/{id}/results once the job has succeeded. With an "
                         "Idempotency-Key header a retry gets the first answer (and starts "
                         "no second batch); the same key with another body is a 422.")
def create_batch(body: BatchCreate, request: Request, session: SessionDep,
                 settings: SettingsDep, tenant: TenantDep,
                 idempotency_key: Annotated[str | None, Header(max_length=255)] = None,
                 ) -> JSONResponse:
    digest = hashlib.sha256(body.model_dump_json().encode()).hexdigest()
    if idempotency_key:
        record = find_idempotent(session=session, tenant=tenant, key=idempotency_key)
        if record is not None:
            return _replay(record, digest)
    try:
        prepare(body, settings)
    except TableError as exc:
        field = "group_by" if exc.column == "group_by" else f"table.{exc.column}"
        raise InvalidField(field, str(exc)) from None
    job = submit_job(session=session, tenant=tenant, kind="batch", spec=body,
                     max_attempts=settings.job_max_attempts, commit=False)
    out, location = job_public(job), f"/v1/jobs/{job.id}"
    if idempotency_key:
        remember_idempotent(session=session, tenant=tenant, key=idempotency_key,
                            method_path=_WHAT, body_sha256=digest, status_code=202,
                            location=location, response=out)
    winner = commit_or_winner(session=session, tenant=tenant, key=idempotency_key)
    if winner is not None:  # the same key won a race: answer as the winner did
        return _replay(winner, digest)
    request.app.state.jobs.wake()
    return JSONResponse(out, status_code=202,
                        headers={"Location": location, "Retry-After": "1"})


_WHAT = "POST /v1/batches"


def _replay(record: Any, digest: str) -> JSONResponse:
    """The first answer to this Idempotency-Key, or a 422 for another request."""
    if record.body_sha256 != digest or record.method_path != _WHAT:
        raise HTTPException(422, "this Idempotency-Key was used with a different request; "
                                 "use a new key for a new request")
    return JSONResponse(record.response, status_code=record.status_code,
                        headers={"Location": record.location or "",
                                 "Idempotent-Replayed": "true"})


@router.get("/{job_id}/results", response_class=Response,
            summary="Results of a finished batch: forecasts and per-group status",
            description="JSON (default): the summary, `groups` (one status record per "
                        "input group: status ok or failed, error_type, error, series, "
                        "periods, lags) and `forecasts` (one record per group, series and "
                        "date: mean and q<level>). `format=csv` gives one table as CSV, "
                        "`table=forecasts` (default) or `table=groups`.",
            responses={200: {"description": "the results",
                             "content": {"application/json": {}, "text/csv": {}}},
                       404: {"description": "no such batch for this caller",
                             "content": {PROBLEM_JSON: {}}},
                       409: {"description": "not finished yet; poll /v1/jobs/{id}",
                             "content": {PROBLEM_JSON: {}}}})
def read_batch_results(job_id: uuid.UUID, session: SessionDep, tenant: TenantDep,
                       format: Literal["json", "csv"] = "json",
                       table: Literal["forecasts", "groups"] = "forecasts") -> Response:
    job = get_job(session=session, tenant=tenant, job_id=str(job_id))
    if job is None or job.kind != "batch":
        raise HTTPException(404, f"batch {job_id} not found")
    if job.status != "succeeded" or job.result is None:
        raise HTTPException(409, f"batch {job_id} is {job.status}; poll /v1/jobs/{job_id}")
    result = job.result
    status, forecasts = pd.DataFrame(result["status"]), pd.DataFrame(result["forecasts"])
    if format == "csv":
        buffer = io.StringIO()
        (forecasts if table == "forecasts" else status).to_csv(buffer, index=False)
        return Response(buffer.getvalue(), media_type="text/csv; charset=utf-8",
                        headers={"Cache-Control": "private, max-age=86400"})
    summary = {k: v for k, v in result.items() if k not in ("status", "forecasts")}
    return JSONResponse({"id": job.id, **summary, "groups_status": _records(status),
                         "forecasts": _records(forecasts)},
                        headers={"Cache-Control": "private, max-age=86400"})


def _records(frame: pd.DataFrame) -> list[dict[str, object]]:
    return frame.astype(object).where(frame.notna(), None).to_dict(orient="records")
