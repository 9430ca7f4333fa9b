"""Background jobs: rows in the database, run by a pool of worker threads.

Claiming is safe with several service replicas on one database. The oldest queued job is
selected with a row lock that skips rows another worker holds (``SELECT ... FOR UPDATE
SKIP LOCKED`` on PostgreSQL: concurrent claimers take different jobs and never wait on
each other; SQLite has no row locks and serialises writers with its database lock
instead), then taken by a conditional UPDATE (``... WHERE id = ? AND status = 'queued'``
returning the new attempt number, so a lost race is seen and the next job tried). The
claim records its worker (``host:pid:thread``) in the row. A running job holds a short lease
(``job_lease_s``) that a heartbeat renews while the fit runs, up to ``fit_timeout_s``
of wall-clock time. So when a worker dies (crash, kill -9, restart) its jobs' leases run
out within ``job_lease_s``, and :meth:`JobRunner.recover` (at start and every
``job_recovery_interval_s``) puts them back in the queue, or fails them once they used
``job_max_attempts``; a fit that runs past ``fit_timeout_s`` loses its lease the same
way. A worker finishing late cannot overwrite a job that was re-queued meanwhile: its
final UPDATE requires the attempt number it claimed.

Kinds: "fit_model" (fit and store), "update_model" (append observations to a stored
model with the independent prior: its Gibbs chains run again), "backtest" and "batch"
(one model per group on dask.distributed, :mod:`service.batch`; progress by groups). Gibbs fits
report progress (0.1 to 0.9 by sweeps done, written at most every
``PROGRESS_INTERVAL_S``) and stop at the next report once the job is cancelled or
superseded.
"""

from __future__ import annotations

import datetime as dt
import logging
import os
import socket
import threading
import time
import uuid
from typing import Any

import numpy as np
from pydantic import BaseModel
from sqlalchemy import func, select, update
from sqlalchemy.orm import Session, sessionmaker
from sqlalchemy.orm.exc import StaleDataError

from priors import CancelToken, cancel_scope
from priors.errors import PriorsError, WorkCancelled

from .compute.engine import (
    Progress,
    append_observations,
    fit_model,
    frame_from_spec,
    model_params,
    stored_settings,
)
from .compute.limits import check_backtest_limits
from .config import Settings
from .errors import LimitExceeded
from .metrics import Metrics
from .orm import Job
from .schemas import BacktestCreate, ModelCreate, ObservationsCreate
from .serialization import data_from_dict
from .store import get_model, load_fitted, replace_fitted, save_model

__all__ = ["PROGRESS_INTERVAL_S", "TERMINAL", "JobRunner", "cancel_job", "get_job",
           "submit_job"]

log = logging.getLogger("fanfold.jobs")
TERMINAL = frozenset({"succeeded", "failed", "cancelled"})
PROGRESS_INTERVAL_S = 0.5  # at most one progress write per job this often
_CLAIM_TRIES = 5  # queued jobs tried per claim when other workers win the races (SQLite)
_HOST = socket.gethostname()


class _Cancelled(Exception):
    """Raised from a fit's progress callback: the job was cancelled."""


class _Superseded(Exception):
    """Raised from a fit's progress callback: the job is no longer this worker's (its
    lease ran out and it was re-queued or failed)."""


class _Problem(Exception):
    """A job that cannot go on, as the problem document its row will carry."""

    def __init__(self, status: int, title: str, detail: str) -> None:
        super().__init__(detail)
        self.problem = {"title": title, "status": status, "detail": detail}


def _now() -> dt.datetime:
    return dt.datetime.now(dt.UTC)


def submit_job(*, session: Session, tenant: str, kind: str, spec: BaseModel,
               max_attempts: int, commit: bool = True,
               target: dict[str, Any] | None = None) -> Job:
    """Queue a job of ``kind`` ("fit_model", "update_model" or "backtest") for the
    request ``spec``; ``target`` names what an update applies to (stored beside the
    request as ``{"target": ..., "request": ...}``). ``commit=False`` leaves the commit to
    the caller (to write more in the same transaction)."""
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
    Gibbs fit at its next progress report, any job before it stores its result)."""
    if job.status == "queued":
        session.execute(update(Job).where(Job.id == job.id, Job.status == "queued")
                        .values(status="cancelled", updated_at=_now()))
    elif job.status == "running":
        session.execute(update(Job).where(Job.id == job.id).values(cancel_requested=1))
    session.commit()
    session.refresh(job)
    return job


class JobRunner:
    """Worker threads that claim queued jobs and run them."""

    def __init__(self, sessions: sessionmaker[Session], settings: Settings,
                 metrics: Metrics | None = None) -> None:
        self.sessions = sessions
        self.settings = settings
        self.metrics = metrics
        self._stop = threading.Event()
        self._wake = threading.Event()
        self._threads: list[threading.Thread] = []

    # ------------------------------------------------------------------ lifecycle
    def start(self) -> None:
        self.recover()
        for i in range(self.settings.job_workers):
            t = threading.Thread(target=self._loop, name=f"fanfold-job-{i}", daemon=True)
            t.start()
            self._threads.append(t)
        if self._threads:
            t = threading.Thread(target=self._recovery_loop, name="fanfold-job-recovery",
                                 daemon=True)
            t.start()
            self._threads.append(t)

    def stop(self, timeout: float = 20.0) -> None:
        self._stop.set()
        self._wake.set()
        for t in self._threads:
            t.join(timeout)

    def wake(self) -> None:
        self._wake.set()

    # ------------------------------------------------------------------ recovery
    def recover(self) -> int:
        """Re-queue or fail running jobs whose lease has run out; returns how many this
        call changed (replicas recovering at the same moment change each job once: the
        UPDATE re-checks the state, attempt and lease it read)."""
        now = _now()
        changed = 0
        with self.sessions() as s:
            stale = list(s.scalars(select(Job).where(Job.status == "running",
                                                     Job.lease_until < now)))
            for job in stale:
                if job.attempts < job.max_attempts:
                    values: dict[str, Any] = {"status": "queued", "lease_until": None}
                else:
                    values = {"status": "failed", "error": {
                        "title": "Worker lost", "status": 500,
                        "detail": f"the job's worker stopped {job.attempts} time(s) before "
                                  "finishing (crash, restart or time-out); submit it again "
                                  "or fit a smaller model"}}
                done = s.execute(update(Job).where(
                    Job.id == job.id, Job.status == "running", Job.attempts == job.attempts,
                    Job.lease_until < now).values(updated_at=now, **values))
                changed += done.rowcount
            s.commit()
        if changed:
            log.warning("recovered %d job(s) whose lease ran out", changed)
            if self.metrics is not None:
                self.metrics.jobs_recovered.inc(changed)
            self._wake.set()
        return changed

    def _recovery_loop(self) -> None:
        while not self._stop.wait(self.settings.job_recovery_interval_s):
            try:
                self.recover()
            except Exception:  # keep the loop alive; the next round retries
                log.exception("job recovery failed")

    # ------------------------------------------------------------------ work
    def _claim(self) -> tuple[str, int] | None:
        """Take the oldest queued job of a tenant below its cap of running jobs (a soft
        cap: workers claiming at the same moment can exceed it by their number); its id
        and attempt number, or None when there is nothing to take."""
        cap = self.settings.max_running_jobs_per_tenant
        worker = f"{_HOST}:{os.getpid()}:{threading.current_thread().name}"[:255]
        with self.sessions() as s:
            busy = {t for t, count in s.execute(
                select(Job.tenant_id, func.count()).where(Job.status == "running")
                .group_by(Job.tenant_id)) if count >= cap}
            query = select(Job.id).where(Job.status == "queued")
            if busy:
                query = query.where(Job.tenant_id.not_in(busy))
            lost: list[str] = []
            for _ in range(_CLAIM_TRIES):
                candidates = query.where(Job.id.not_in(lost)) if lost else query
                job_id = s.scalar(candidates.order_by(Job.created_at, Job.id).limit(1)
                                  .with_for_update(skip_locked=True))
                if job_id is None:
                    return None
                attempt = s.scalar(
                    update(Job).where(Job.id == job_id, Job.status == "queued").values(
                        status="running", attempts=Job.attempts + 1, progress=0.1,
                        lease_until=_now() + dt.timedelta(seconds=self.settings.job_lease_s),
                        updated_at=_now(), worker=worker)
                    .returning(Job.attempts))
                if attempt is not None:
                    s.commit()
                    return job_id, int(attempt)
                s.rollback()  # another worker took it between the SELECT and the UPDATE
                lost.append(job_id)
        return None

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                claim = self._claim()
            except Exception:
                log.exception("claiming a job failed")
                claim = None
            if claim is None:
                self._wake.wait(0.5)
                self._wake.clear()
                continue
            self.run_one(*claim)

    def _heartbeat(self, job_id: str, attempt: int, done: threading.Event) -> None:
        """Renew the lease every third of it, until done or past the fit time limit."""
        lease = self.settings.job_lease_s
        deadline = time.monotonic() + self.settings.fit_timeout_s
        while not done.wait(lease / 3):
            if time.monotonic() > deadline:
                log.warning("job over its time limit; letting its lease run out",
                            extra={"job_id": job_id})
                return
            try:
                with self.sessions() as s:
                    s.execute(update(Job).where(
                        Job.id == job_id, Job.status == "running", Job.attempts == attempt,
                    ).values(lease_until=_now() + dt.timedelta(seconds=lease)))
                    s.commit()
            except Exception:  # the next beat tries again; the lease is the safety net
                log.exception("heartbeat failed", extra={"job_id": job_id})

    def run_one(self, job_id: str, attempt: int) -> None:
        """Run a claimed job to a terminal state (or leave it to recovery if this
        worker's claim was superseded)."""
        done = threading.Event()
        beat = threading.Thread(target=self._heartbeat, args=(job_id, attempt, done),
                                daemon=True, name=f"fanfold-heartbeat-{job_id[:8]}")
        beat.start()
        try:
            self._run_claimed(job_id, attempt)
        finally:
            done.set()
            beat.join(5)

    def _run_claimed(self, job_id: str, attempt: int) -> None:
        with self.sessions() as s:
            job = s.get(Job, job_id)
            assert job is not None
            mine = (Job.id == job_id, Job.status == "running", Job.attempts == attempt)

            def fail(error: dict[str, Any]) -> None:
                s.rollback()
                s.execute(update(Job).where(*mine).values(status="failed", updated_at=_now(),
                                                          error=error))
                s.commit()

            # the engine stops at its next checkpoint once the time limit has passed
            limit = CancelToken(deadline_s=self.settings.fit_timeout_s)
            try:
                with cancel_scope(limit):
                    if job.kind == "backtest":
                        self._backtest(s, job, mine)
                    elif job.kind == "batch":
                        self._batch(s, job, mine)
                    elif job.kind == "update_model":
                        self._update_model(s, job, mine)
                    else:
                        self._fit_model(s, job, mine)
            except WorkCancelled:
                fail({"title": "Time limit exceeded", "status": 503,
                      "detail": f"the job ran past this server's limit of "
                                f"{self.settings.fit_timeout_s:g} s and was stopped; ask "
                                "for less work (keep, burn, chains, origins, lags)"})
            except _Cancelled:
                s.rollback()
                s.execute(update(Job).where(*mine).values(status="cancelled",
                                                          updated_at=_now()))
                s.commit()
            except _Superseded:
                s.rollback()
                log.warning("job taken away from this worker; stopped its fit",
                            extra={"job_id": job_id})
            except _Problem as exc:
                fail(exc.problem)
            except StaleDataError:
                fail({"title": "Conflict", "status": 409,
                      "detail": "the model changed while this job was updating it; fetch "
                                "it and send the observations again"})
            except (PriorsError, LimitExceeded) as exc:
                detail = exc.message if isinstance(exc, LimitExceeded) else str(exc)
                fail({"title": "The model cannot use this input", "status": 422,
                      "type": f"urn:fanfold:problem:{type(exc).__name__}", "detail": detail})
            except Exception:
                log.exception("job failed", extra={"job_id": job_id})
                fail({"title": "Internal Server Error", "status": 500,
                      "detail": "the job failed unexpectedly; the error is logged "
                                f"with job_id {job_id}"})

    def _progress(self, mine: tuple[Any, ...]) -> Progress:
        """A fit's progress callback: sweeps done -> job progress from 0.1 to 0.9, written
        at most every ``PROGRESS_INTERVAL_S``; raises :class:`_Cancelled` once the job's
        cancel flag is set and :class:`_Superseded` once the job is not this worker's."""
        last = -float("inf")

        def progress(done: int, total: int) -> None:
            nonlocal last
            now = time.monotonic()
            if now - last < PROGRESS_INTERVAL_S:
                return
            last = now
            with self.sessions() as p:
                mark = p.execute(update(Job).where(*mine).values(
                    progress=0.1 + 0.8 * done / max(total, 1), updated_at=_now()))
                cancel = p.scalar(select(Job.cancel_requested).where(*mine))
                p.commit()
            if mark.rowcount != 1:
                raise _Superseded
            if cancel:
                raise _Cancelled

        return progress

    def _fitted_and_not_cancelled(self, s: Session, job: Job, mine: tuple[Any, ...]) -> None:
        """Mark the fit done (progress 0.9); raise :class:`_Cancelled` if the job was
        cancelled meanwhile."""
        s.execute(update(Job).where(*mine).values(progress=0.9, updated_at=_now()))
        s.commit()
        s.refresh(job)
        if job.cancel_requested:
            raise _Cancelled

    def _succeed(self, s: Session, mine: tuple[Any, ...], model_id: str) -> None:
        """Mark the job succeeded with its model in the transaction that stored it (or
        keep nothing if the job was re-queued meanwhile)."""
        done = s.execute(update(Job).where(*mine).values(
            status="succeeded", progress=1.0, result_model_id=model_id, updated_at=_now()))
        if done.rowcount != 1:
            s.rollback()
            return
        s.commit()

    def _fit_model(self, s: Session, job: Job, mine: tuple[Any, ...]) -> None:
        """Fit and store a model."""
        spec = ModelCreate.model_validate(job.payload)
        frame = frame_from_spec(spec)
        started = time.perf_counter()
        fitted = fit_model(spec, frame, self.settings, progress=self._progress(mine))
        if self.metrics is not None:
            self.metrics.fit.observe(time.perf_counter() - started)
        self._fitted_and_not_cancelled(s, job, mine)
        row = save_model(session=s, tenant=job.tenant_id, name=spec.name,
                         params=stored_settings(fitted.model, fitted.seed), frame=frame,
                         model=fitted.model, commit=False)
        self._succeed(s, mine, row.id)

    def _update_model(self, s: Session, job: Job, mine: tuple[Any, ...]) -> None:
        """Append observations to a stored model, rerunning its Gibbs chains from its
        stored seed, and replace it (version + 1), provided it has not changed since the
        observations were sent."""
        target, spec = job.payload["target"], ObservationsCreate.model_validate(
            job.payload["request"])
        model_id = target["model_id"]
        row = get_model(session=s, tenant=job.tenant_id, model_id=model_id)
        if row is None:
            raise _Problem(404, "Not Found", f"model {model_id} was deleted before the "
                                             "update ran")
        if row.version != target["version"]:
            raise _Problem(409, "Conflict", (
                f"model {model_id} changed (version {target['version']} -> {row.version}) "
                "since these observations were sent; fetch it and send them again"))
        s.commit()  # no transaction held open during the fit; the version is checked
        started = time.perf_counter()
        fitted, frame = append_observations(
            load_fitted(row), data_from_dict(row.data), frame_from_spec(spec),
            seed=row.settings.get("seed"), progress=self._progress(mine))
        if self.metrics is not None:
            self.metrics.fit.observe(time.perf_counter() - started)
        self._fitted_and_not_cancelled(s, job, mine)
        replace_fitted(session=s, row=row, frame=frame, model=fitted.model,
                       seed=fitted.seed, commit=False)
        self._succeed(s, mine, row.id)

    def _backtest(self, s: Session, job: Job, mine: tuple[Any, ...]) -> None:
        """Run a rolling-origin backtest; progress is the share of origins done."""
        from priors.backtest import rolling_origin

        spec = BacktestCreate.model_validate(job.payload)
        frame = frame_from_spec(spec)
        check_backtest_limits(spec, frame.shape[1], frame.shape[0], self.settings)
        benchmarks = ("ols_var", "random_walk") + (("seasonal_naive",) if spec.period else ())
        if spec.prior == "flat":
            benchmarks = tuple(b for b in benchmarks if b != "ols_var")

        def progress(done: int, total: int) -> None:
            with self.sessions() as p:
                p.execute(update(Job).where(*mine).values(
                    progress=0.95 * done / total, updated_at=_now()))
                p.commit()

        result = rolling_origin(frame, params=model_params(spec), origins=spec.origins,
                                horizon=spec.horizon, window=spec.window, draws=spec.draws,
                                coverage=spec.coverage, period=spec.period,
                                benchmarks=benchmarks, rng=np.random.default_rng(spec.seed),
                                progress=progress)
        s.refresh(job)
        if job.cancel_requested:
            raise _Cancelled
        scores = result.scores().replace({np.nan: None}).to_dict(orient="records")
        logs = result.log_scores().replace({np.nan: None}).to_dict(orient="records")
        calibration = (result.pit_tests().replace({np.nan: None}).to_dict(orient="records")
                       if spec.origins >= 10 else [])
        payload = {"origins": spec.origins, "horizon": spec.horizon, "seed": spec.seed,
                   "coverage": spec.coverage, "scores": scores, "log_scores": logs,
                   "energy_scores": result.energy_scores().to_dict(orient="records"),
                   "dm_tests": result.dm_tests().replace({np.nan: None})
                   .to_dict(orient="records"),
                   "calibration": calibration}
        s.execute(update(Job).where(*mine).values(status="succeeded", progress=1.0,
                                                  result=payload, updated_at=_now()))
        s.commit()

    def _batch(self, s: Session, job: Job, mine: tuple[Any, ...]) -> None:
        """Forecast every group of a long table on Dask; progress by groups done."""
        from .batch import job as batch_job

        try:
            result = batch_job.run(job.payload, self.settings, progress=self._progress(mine))
        except (OSError, TimeoutError) as exc:  # the scheduler cannot be reached
            where = self.settings.dask_address or "a local cluster"
            raise _Problem(503, "Batch cluster unavailable",
                           f"cannot run the batch on {where}: {exc}") from exc
        s.refresh(job)
        if job.cancel_requested:
            raise _Cancelled
        s.execute(update(Job).where(*mine).values(status="succeeded", progress=1.0,
                                                  result=result, updated_at=_now()))
        s.commit()
