"""The job queue's rows: submit, read and cancel jobs (the runner is
:mod:`service.jobs.runner`)."""

from __future__ import annotations

import datetime as dt
import uuid
from typing import Any

from pydantic import BaseModel
from sqlalchemy import select, update
from sqlalchemy.orm import Session

from ..orm import Job

__all__ = ["KINDS", "TERMINAL", "cancel_job", "get_job", "now", "submit_job"]

TERMINAL = frozenset({"succeeded", "failed", "cancelled"})
#: what a job can be: fit and store a model, append observations to one, a rolling-origin
#: backtest, a batch of groups (service.batch)
KINDS = ("fit_model", "update_model", "backtest", "batch")


def now() -> dt.datetime:
    return dt.datetime.now(dt.UTC)


def submit_job(*, session: Session, tenant: str, kind: str, spec: BaseModel,
               max_attempts: int, commit: bool = True,
               target: dict[str, Any] | None = None) -> Job:
    """Queue a job of ``kind`` (one of :data:`KINDS`) for the request ``spec``;
    ``target`` names what an update applies to (stored beside the request as
    ``{"target": ..., "request": ...}``). ``commit=False`` leaves the commit to the
    caller (to write more in the same transaction)."""
    if kind not in KINDS:
        raise ValueError(f"unknown job kind {kind!r}")
    payload = spec.model_dump(mode="json")
    if target is not None:
        payload = {"target": target, "request": payload}
    job = Job(id=str(uuid.uuid4()), tenant_id=tenant, kind=kind, status="queued",
              progress=0.0, attempts=0, max_attempts=max_attempts, cancel_requested=0,
              payload=payload)
    session.add(job)
    if commit:
        session.commit()
    else:
        session.flush()
    return job


def get_job(*, session: Session, tenant: str, job_id: str) -> Job | None:
    return session.scalar(select(Job).where(Job.id == job_id, Job.tenant_id == tenant))


def cancel_job(*, session: Session, job: Job) -> Job:
    """Cancel a queued job at once; ask a running one to stop (it ends ``cancelled``: a
    Gibbs fit or a backtest at its next progress report, any job before it stores its
    result)."""
    if job.status == "queued":
        session.execute(update(Job).where(Job.id == job.id, Job.status == "queued")
                        .values(status="cancelled", updated_at=now()))
    elif job.status == "running":
        session.execute(update(Job).where(Job.id == job.id).values(cancel_requested=1))
    session.commit()
    session.refresh(job)
    return job
