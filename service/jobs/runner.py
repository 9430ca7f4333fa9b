"""The job runner: worker threads that claim queued jobs, keep their leases and store
what the work returns.

Claiming is safe with several service replicas on one database. The oldest queued job is
selected with a row lock that skips rows another worker holds (``SELECT ... FOR UPDATE
SKIP LOCKED`` on PostgreSQL: concurrent claimers take different jobs and never wait on
each other; SQLite has no row locks and serialises writers with its database lock
instead), then taken by a conditional UPDATE (``... WHERE id = ? AND status = 'queued'``
returning the new attempt number, so a lost race is seen and the next job tried). The
claim records its worker (``host:pid:thread``) in the row. A running job holds a short lease
(``job_lease_s``) that a heartbeat renews while the work runs, up to ``fit_timeout_s``
of wall-clock time. So when a worker dies (crash, kill -9, restart) its jobs' leases run
out within ``job_lease_s``, and :meth:`JobRunner.recover` (at start and every
``job_recovery_interval_s``) puts them back in the queue, or fails them once they used
``job_max_attempts``; work that runs past ``fit_timeout_s`` loses its lease the same
way. A worker finishing late cannot overwrite a job that was re-queued meanwhile: its
final UPDATE requires the attempt number it claimed.

Where the work runs (:mod:`service.jobs.work`): in the claiming thread, or with
``job_executor = "dask"`` on the Dask cluster (:mod:`service.jobs.cluster`); batch jobs
always use the cluster. Progress (0.1 to 0.9 by Gibbs sweeps or backtest origins done,
groups for a batch) is written at most every ``PROGRESS_INTERVAL_S``, and the work stops
at its next report once the job is cancelled or superseded.
"""

from __future__ import annotations

import datetime as dt
import logging
import os
import socket
import threading
import time
from typing import Any

from sqlalchemy import func, select, update
from sqlalchemy.orm import Session, sessionmaker

from priors import CancelToken, cancel_scope

from ..config import Settings
from ..metrics import Metrics
from ..orm import Job
from ..schemas import ModelCreate
from ..store import get_model, replace_columns, row_columns, save_columns
from .cluster import Cluster, run_remote
from .problems import Cancelled, ClusterLost, JobProblem, Superseded, problem_of
from .queue import now
from .work import Progress, run_work, worker_limits

__all__ = ["PROGRESS_INTERVAL_S", "JobRunner"]

log = logging.getLogger("fanfold.jobs")
PROGRESS_INTERVAL_S = 0.5  # at most one progress write per job this often
_CLAIM_TRIES = 5  # queued jobs tried per claim when other workers win the races (SQLite)
_HOST = socket.gethostname()


class JobRunner:
    """Worker threads that claim queued jobs and run them."""

    def __init__(self, sessions: sessionmaker[Session], settings: Settings,
                 metrics: Metrics | None = None) -> None:
        self.sessions = sessions
        self.settings = settings
        self.metrics = metrics
        self.cluster = Cluster(settings)
        self.remote = settings.job_executor == "dask"
        self._stop = threading.Event()
        self._wake = threading.Event()
        self._threads: list[threading.Thread] = []
        self._cluster_down_logged = 0.0

    # ------------------------------------------------------------------ lifecycle
    def start(self) -> None:
        self.recover()
        if self.remote and self.settings.job_workers:
            reason = self.cluster.problem()  # connect (or start the local cluster) now
            if reason:
                log.warning("jobs wait for the Dask cluster: %s", reason)
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
        self.cluster.close()

    def wake(self) -> None:
        self._wake.set()

    def cluster_problem(self) -> str | None:
        """For readiness: why the configured Dask cluster cannot take work (None when it
        can, or when none is configured)."""
        return self.cluster.problem() if self.cluster.checked else None

    # ------------------------------------------------------------------ recovery
    def recover(self) -> int:
        """Re-queue or fail running jobs whose lease has run out; returns how many this
        call changed (replicas recovering at the same moment change each job once: the
        UPDATE re-checks the state, attempt and lease it read)."""
        moment = now()
        changed = 0
        with self.sessions() as s:
            stale = list(s.scalars(select(Job).where(Job.status == "running",
                                                     Job.lease_until < moment)))
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
                    Job.lease_until < moment).values(updated_at=moment, **values))
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

    # ------------------------------------------------------------------ claiming
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
                        lease_until=now() + dt.timedelta(seconds=self.settings.job_lease_s),
                        updated_at=now(), worker=worker)
                    .returning(Job.attempts))
                if attempt is not None:
                    s.commit()
                    return job_id, int(attempt)
                s.rollback()  # another worker took it between the SELECT and the UPDATE
                lost.append(job_id)
        return None

    def _cluster_down(self) -> bool:
        """With jobs on the cluster: whether it cannot take work now (logged once a
        minute); the jobs then wait in the queue instead of failing."""
        if not self.remote:
            return False
        reason = self.cluster.problem()
        if reason and time.monotonic() - self._cluster_down_logged > 60:
            self._cluster_down_logged = time.monotonic()
            log.warning("jobs wait in the queue: %s", reason)
        return reason is not None

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                claim = None if self._cluster_down() else self._claim()
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
                    ).values(lease_until=now() + dt.timedelta(seconds=lease)))
                    s.commit()
            except Exception:  # the next beat tries again; the lease is the safety net
                log.exception("heartbeat failed", extra={"job_id": job_id})

    # ------------------------------------------------------------------ running
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

            def end(status: str, **values: Any) -> None:
                s.rollback()
                s.execute(update(Job).where(*mine).values(status=status,
                                                          updated_at=now(), **values))
                s.commit()

            # the engine stops at its next checkpoint once the time limit has passed
            limit = CancelToken(deadline_s=self.settings.fit_timeout_s)
            try:
                with cancel_scope(limit):
                    if job.kind == "batch":
                        self._batch(s, job, mine)
                    else:
                        self._work(s, job, mine, attempt)
            except Cancelled:
                end("cancelled")
            except Superseded:
                s.rollback()
                log.warning("job taken away from this worker; stopped its work",
                            extra={"job_id": job_id})
            except ClusterLost as exc:
                log.warning("job's cluster lost: %s", exc, extra={"job_id": job_id})
                if attempt < job.max_attempts:
                    end("queued", lease_until=None)
                else:
                    end("failed", error={"title": "Cluster unavailable", "status": 503,
                                         "detail": f"{exc}; submit the job again"})
            except Exception as exc:
                problem = problem_of(exc, time_limit_s=self.settings.fit_timeout_s)
                if problem is None:
                    log.exception("job failed", extra={"job_id": job_id})
                    problem = {"title": "Internal Server Error", "status": 500,
                               "detail": "the job failed unexpectedly; the error is logged "
                                         f"with job_id {job_id}"}
                end("failed", error=problem)

    def _progress(self, mine: tuple[Any, ...]) -> Progress:
        """The work's progress callback: done/total -> job progress from 0.1 to 0.9,
        written at most every ``PROGRESS_INTERVAL_S``; raises :class:`Cancelled` once the
        job's cancel flag is set and :class:`Superseded` once the job is not this
        worker's."""
        last = -float("inf")

        def progress(done: int, total: int) -> None:
            nonlocal last
            moment = time.monotonic()
            if moment - last < PROGRESS_INTERVAL_S:
                return
            last = moment
            with self.sessions() as p:
                mark = p.execute(update(Job).where(*mine).values(
                    progress=0.1 + 0.8 * done / max(total, 1), updated_at=now()))
                cancel = p.scalar(select(Job.cancel_requested).where(*mine))
                p.commit()
            if mark.rowcount != 1:
                raise Superseded
            if cancel:
                raise Cancelled

        return progress

    def _execute(self, job: Job, attempt: int, inputs: dict[str, Any],
                 mine: tuple[Any, ...]) -> dict[str, Any]:
        """The job's work, here or on the cluster; what it returned."""
        progress = self._progress(mine)
        if self.remote:
            out, seconds = run_remote(
                self.cluster.client(), channel=f"fanfold-job-{job.id}-{attempt}",
                kind=job.kind, inputs=inputs, limits=worker_limits(self.settings),
                progress=progress, interval=PROGRESS_INTERVAL_S,
                grace_s=self.settings.job_lease_s)
        else:
            out, seconds = run_work(job.kind, inputs, self.settings, progress)
        if self.metrics is not None and job.kind != "backtest":
            self.metrics.fit.observe(seconds)
        return out

    def _work(self, s: Session, job: Job, mine: tuple[Any, ...], attempt: int) -> None:
        """A fit, update or backtest: gather its inputs, run it, store what it returned."""
        inputs: dict[str, Any] = {"request": job.payload}
        row = None
        if job.kind == "update_model":
            target = job.payload["target"]
            inputs["request"] = job.payload["request"]
            row = get_model(session=s, tenant=job.tenant_id, model_id=target["model_id"])
            if row is None:
                raise JobProblem(404, "Not Found", f"model {target['model_id']} was deleted "
                                                   "before the update ran")
            if row.version != target["version"]:
                raise JobProblem(409, "Conflict", (
                    f"model {target['model_id']} changed (version {target['version']} -> "
                    f"{row.version}) since these observations were sent; fetch it and send "
                    "them again"))
            inputs["stored"] = row_columns(row)
        s.commit()  # no transaction held open during the work (an update's version is
        # checked again when it is stored)
        out = self._execute(job, attempt, inputs, mine)
        s.execute(update(Job).where(*mine).values(progress=0.9, updated_at=now()))
        s.commit()
        s.refresh(job)
        if job.cancel_requested:
            raise Cancelled
        values: dict[str, Any] = {"status": "succeeded", "progress": 1.0, "updated_at": now()}
        if job.kind == "fit_model":
            name = ModelCreate.model_validate(job.payload).name
            values["result_model_id"] = save_columns(session=s, tenant=job.tenant_id,
                                                     name=name, columns=out, commit=False).id
        elif job.kind == "update_model":
            assert row is not None
            replace_columns(session=s, row=row, columns=out, commit=False)
            values["result_model_id"] = row.id
        else:
            values["result"] = out
        # succeeded in the transaction that stored the model (nothing kept if the job was
        # re-queued meanwhile)
        if s.execute(update(Job).where(*mine).values(**values)).rowcount != 1:
            s.rollback()
            return
        s.commit()

    def _batch(self, s: Session, job: Job, mine: tuple[Any, ...]) -> None:
        """Forecast every group of a long table on the cluster; progress by groups."""
        from ..batch import job as batch_job

        try:
            client = self.cluster.client()
            result = batch_job.run(job.payload, self.settings, progress=self._progress(mine),
                                   client=client)
        except (OSError, TimeoutError) as exc:  # the scheduler cannot be reached
            raise JobProblem(503, "Batch cluster unavailable",
                             f"cannot run the batch on {self.cluster.where}: {exc}") from exc
        s.refresh(job)
        if job.cancel_requested:
            raise Cancelled
        s.execute(update(Job).where(*mine).values(status="succeeded", progress=1.0,
                                                  result=result, updated_at=now()))
        s.commit()
