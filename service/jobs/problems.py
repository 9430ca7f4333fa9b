"""How a job ends when it cannot succeed: the exceptions that stop it and the problem
document (RFC 9457 members) its row keeps, the same wherever the work ran."""

from __future__ import annotations

from typing import Any

from distributed.scheduler import KilledWorker
from sqlalchemy.orm.exc import StaleDataError

from priors.errors import PriorsError, WorkCancelled

from ..errors import LimitExceeded

__all__ = ["Cancelled", "ClusterLost", "JobProblem", "Superseded", "problem_of"]


class Cancelled(Exception):
    """The job was cancelled (raised from its progress report)."""


class Superseded(Exception):
    """The job is no longer this worker's: its lease ran out and it was re-queued or
    failed (raised from its progress report)."""


class ClusterLost(Exception):
    """The Dask cluster went away while the job's work ran there: the job goes back to
    the queue (another attempt) instead of failing."""


class JobProblem(Exception):
    """A job that cannot go on, as the problem document its row will carry."""

    def __init__(self, status: int, title: str, detail: str) -> None:
        super().__init__(detail)
        self.problem: dict[str, Any] = {"title": title, "status": status, "detail": detail}

    @classmethod
    def from_document(cls, problem: dict[str, Any]) -> JobProblem:
        """The problem document made elsewhere (on a Dask worker) as this exception."""
        made = cls(int(problem["status"]), str(problem["title"]), str(problem["detail"]))
        made.problem = dict(problem)
        return made


def problem_of(exc: BaseException, *, time_limit_s: float) -> dict[str, Any] | None:
    """The problem document for an error that ends a job, or None for an unexpected one
    (the caller logs it and keeps a 500 without details)."""
    if isinstance(exc, JobProblem):
        return exc.problem
    if isinstance(exc, WorkCancelled):
        return {"title": "Time limit exceeded", "status": 503,
                "detail": f"the job ran past this server's limit of {time_limit_s:g} s "
                          "and was stopped; ask for less work (keep, burn, chains, "
                          "origins, lags)"}
    if isinstance(exc, StaleDataError):
        return {"title": "Conflict", "status": 409,
                "detail": "the model changed while this job was updating it; fetch it and "
                          "send the observations again"}
    if isinstance(exc, KilledWorker):
        return {"title": "Worker lost", "status": 500,
                "detail": "the Dask worker process running this job died on every attempt "
                          "(out of memory, or killed); give the workers more memory or "
                          "fit a smaller model"}
    if isinstance(exc, PriorsError | LimitExceeded):
        detail = exc.message if isinstance(exc, LimitExceeded) else str(exc)
        return {"title": "The model cannot use this input", "status": 422,
                "type": f"urn:fanfold:problem:{type(exc).__name__}", "detail": detail}
    return None
