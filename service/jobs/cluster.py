"""Jobs on dask.distributed: this process's connection to the cluster, and a job's work
run on a worker with its progress and cancellation carried across processes.

:class:`Cluster` is made on first use and kept until shutdown: a client of the scheduler
at ``FANFOLD_DASK_ADDRESS`` (mutual TLS from the ``FANFOLD_DASK_TLS_*`` files), or of a
``LocalCluster`` started in this process (worker processes, one thread each). Batch jobs
always run on it; fit, update and backtest jobs too with ``FANFOLD_JOB_EXECUTOR=dask``.

:func:`run_remote` sends one job's work (:func:`service.jobs.work.run_work`) as one task,
keyed by the job and attempt. The job thread stays with the database: it keeps the
lease, writes progress and stores the result; the worker sees plain data only (the
request, a stored model's columns, the settings without secrets). Across processes:

- progress: the task publishes ``(done, total)`` in a Dask ``Variable`` at most every
  ``interval`` seconds; the job thread reads it each ``interval`` and reports it (where
  a cancelled or superseded job raises);
- stopping: the job thread sets a Dask ``Event``; the task sees it at its next progress
  report and ends (a Gibbs fit between sweeps, a backtest between origins). Dask's own
  cancellation does not interrupt a running task;
- time limit: the task runs under the job's deadline (:mod:`priors.cancellation`), and
  the job thread gives up ``lease`` seconds after it;
- errors the job reports (bad input, limits, time limit) come back as problem documents,
  since not every exception survives pickling; a worker that dies on every attempt
  (``KilledWorker``) fails the job as "Worker lost"; a lost scheduler connection sends
  the job back to the queue (:class:`~service.jobs.problems.ClusterLost`).
"""

from __future__ import annotations

import contextlib
import logging
import math
import threading
import time
from concurrent.futures import CancelledError
from typing import Any

from distributed import Client, Event, LocalCluster, Variable

from priors import CancelToken, cancel_scope
from priors.errors import WorkCancelled

from ..batch.runner import dask_security, local_cluster
from ..compute.engine import blas_threads
from ..config import Settings
from .problems import ClusterLost, JobProblem, problem_of
from .work import Progress, run_work

__all__ = ["Cluster", "run_remote"]

log = logging.getLogger("fanfold.jobs")
_RETRY_CONNECT_S = 5.0  # after a failed connection, answer from it this long
_CHECK_EVERY_S = 1.0  # the job threads and /readyz ask the scheduler at most this often


class Cluster:
    """This process's client of dask.distributed, made on first use (thread-safe)."""

    def __init__(self, settings: Settings, *, connect_timeout_s: float = 5.0) -> None:
        self.settings = settings
        self.connect_timeout_s = connect_timeout_s
        self._lock = threading.Lock()
        self._client: Client | None = None
        self._local: LocalCluster | None = None
        self._failed: tuple[float, str] | None = None
        self._checked: tuple[float, str | None] | None = None

    @property
    def where(self) -> str:
        return self.settings.dask_address or "a local cluster"

    @property
    def checked(self) -> bool:
        """Whether readiness depends on the cluster: a scheduler is configured, or jobs
        run on the cluster."""
        return bool(self.settings.dask_address) or self.settings.job_executor == "dask"

    def client(self) -> Client:
        """The client, connecting (or starting the local cluster) when there is none or
        the last one closed; raises ``OSError``/``TimeoutError`` when the scheduler
        cannot be reached."""
        with self._lock:
            if self._client is not None and self._client.status == "running":
                return self._client
            if self._failed is not None and time.monotonic() - self._failed[0] < _RETRY_CONNECT_S:
                raise OSError(self._failed[1])
            self._close()
            try:
                self._client = self._connect()
            except (OSError, TimeoutError) as exc:
                self._failed = (time.monotonic(), f"cannot reach the Dask scheduler at "
                                                  f"{self.where}: {exc}")
                raise OSError(self._failed[1]) from exc
            self._failed = None
            return self._client

    def _connect(self) -> Client:
        s = self.settings
        security = dask_security(ca_file=s.dask_tls_ca_file, cert_file=s.dask_tls_cert_file,
                                 key_file=s.dask_tls_key_file)
        if s.dask_address:
            return Client(s.dask_address, security=security, timeout=self.connect_timeout_s,
                          set_as_default=False)
        self._local = local_cluster(workers=s.dask_workers, processes=s.dask_processes,
                                    security=security)
        return Client(self._local, timeout=max(self.connect_timeout_s, 30.0),
                      set_as_default=False)

    def problem(self) -> str | None:
        """Why jobs cannot run on the cluster now (unreachable, no workers), or None;
        asked of the scheduler at most every ``_CHECK_EVERY_S`` seconds."""
        checked = self._checked
        if checked is not None and time.monotonic() - checked[0] < _CHECK_EVERY_S:
            return checked[1]
        try:
            client = self.client()
            workers = client.scheduler_info(n_workers=1).get("n_workers", 0)
            reason = None if workers else f"the Dask cluster at {self.where} has no workers"
        except (OSError, TimeoutError) as exc:
            reason = str(exc)
        self._checked = (time.monotonic(), reason)
        return reason

    def close(self) -> None:
        with self._lock:
            self._close()

    def _close(self) -> None:
        for part in (self._client, self._local):
            if part is not None:
                with contextlib.suppress(Exception):
                    part.close()
        self._client = self._local = None


class _Stopped(Exception):
    """Raised in the task when the job thread asked it to stop."""


def _task(channel: str, kind: str, inputs: dict[str, Any], limits: Settings,
          interval: float) -> dict[str, Any]:
    """A job's work on a Dask worker: ``{"result": ..., "seconds": ...}``, or
    ``{"problem": ...}`` for an error the job reports, or ``{"stopped": True}``."""
    reported, stop = Variable(f"{channel}-progress"), Event(f"{channel}-stop")
    last = -math.inf

    def progress(done: int, total: int) -> None:
        nonlocal last
        if time.monotonic() - last < interval:
            return
        last = time.monotonic()
        reported.set((done, total))
        if stop.is_set():
            raise _Stopped

    try:
        with cancel_scope(CancelToken(deadline_s=limits.fit_timeout_s)), \
                blas_threads(limits.blas_threads):
            result, seconds = run_work(kind, inputs, limits, progress)
    except _Stopped:
        return {"stopped": True}
    except Exception as exc:
        problem = problem_of(exc, time_limit_s=limits.fit_timeout_s)
        if problem is None:
            raise
        return {"problem": problem}
    return {"result": result, "seconds": seconds}


def run_remote(client: Client, *, channel: str, kind: str, inputs: dict[str, Any],
               limits: Settings, progress: Progress, interval: float,
               grace_s: float, stop_wait_s: float = 10.0) -> tuple[dict[str, Any], float]:
    """Run a job's work on the cluster as task ``channel``; what it returned and its
    seconds. ``progress(done, total)`` is called in this thread with the task's reports
    and may raise to stop the task (the exception is re-raised here once the task has
    stopped, or ``stop_wait_s`` later). Past ``limits.fit_timeout_s + grace_s`` seconds
    this thread stops the task and raises :class:`WorkCancelled`."""
    future = client.submit(_task, channel, kind, inputs, limits, interval, key=channel,
                           pure=False)
    reported = Variable(f"{channel}-progress", client=client)
    reported.set(None)  # reading an unset Variable logs an error on the scheduler
    stop = Event(f"{channel}-stop", client=client)
    deadline = time.monotonic() + limits.fit_timeout_s + grace_s
    seen: Any = None
    try:
        while True:
            try:
                outcome = future.result(timeout=interval)
                break
            except TimeoutError:
                pass
            except (CancelledError, OSError) as exc:  # the client lost the scheduler
                raise ClusterLost(f"the Dask cluster at {client.scheduler.address} went "
                                  f"away while the job ran ({type(exc).__name__})") from exc
            if client.status != "running":
                raise ClusterLost("the connection to the Dask cluster closed")
            now_at = reported.get()
            if now_at is not None and now_at != seen:
                seen = now_at
                progress(*now_at)
            if time.monotonic() > deadline:
                raise WorkCancelled("the job's work on the cluster ran past its time limit")
    except BaseException:
        _stop(future, stop, stop_wait_s)
        raise
    finally:
        with contextlib.suppress(Exception):
            reported.delete()
        if future.done():
            with contextlib.suppress(Exception):
                stop.clear()  # an event left set would be kept by the scheduler
        future.release()
    if "problem" in outcome:
        raise JobProblem.from_document(outcome["problem"])
    if "stopped" in outcome:  # only this thread stops tasks, and it raised then
        raise ClusterLost("the task stopped without being asked to")
    return outcome["result"], float(outcome["seconds"])


def _stop(future: Any, stop: Event, wait_s: float) -> None:
    """Ask the task to stop and wait for it (bounded); cancel it if it has not started."""
    with contextlib.suppress(Exception):
        stop.set()
        future.exception(timeout=wait_s)
    if not future.done():
        with contextlib.suppress(Exception):
            future.cancel()
        log.warning("a job's task on the cluster did not stop within %g s", wait_s,
                    extra={"task": future.key})
