"""Running a batch on dask.distributed: connect, submit chunks, retry, count progress.

:func:`batch_client` connects to the scheduler at ``address`` (``FANFOLD_DASK_ADDRESS``
or ``fanfold batch --scheduler``), with TLS from :func:`dask_security`, or starts an
in-process ``LocalCluster`` (worker processes, one thread each, one per core) for the
duration of the batch. :func:`run_batch` sends the groups in chunks (many groups per
task: a task costs the scheduler about a millisecond), each task with ``retries`` for
errors it raises; a task whose workers kept dying (``KilledWorker``, after the
scheduler's ``allowed-failures``) is sent again one group per task, so that only the
group that kills its worker is lost; a task that still fails becomes failures of its
groups, with the reason. Every input group comes back exactly once.
"""

from __future__ import annotations

import asyncio
import contextlib
import math
import os
import uuid
from collections.abc import Callable, Iterator, Sequence
from typing import Any

from distributed import Client, LocalCluster, as_completed
from distributed.scheduler import KilledWorker
from distributed.security import Security

from priors.cancellation import checkpoint

from .worker import ForecastSpec, GroupArrays, GroupForecast, failed, forecast_chunk

__all__ = ["LOCAL_HTTP", "MAX_CHUNK", "batch_client", "chunk_size_for", "dask_security",
           "local_cluster", "run_batch"]

MAX_CHUNK = 50  # groups per task at most, by default
#: where a LocalCluster's scheduler serves HTTP (health, metrics; it always does): None
#: would mean port 8787 on every interface, and a warning when another cluster has it
LOCAL_HTTP = "127.0.0.1:0"
Progress = Callable[[int, int], None]
ChunkFunction = Callable[[Sequence[GroupArrays], ForecastSpec], list[GroupForecast]]


def dask_security(*, ca_file: str = "", cert_file: str = "", key_file: str = ""
                  ) -> Security | None:
    """Mutual TLS for the client (all three files: the CA that signed the scheduler's
    and workers' certificates, this client's certificate and key), or None without
    them. With TLS, plain tcp:// addresses are refused (``require_encryption``)."""
    files = {"CA": ca_file, "certificate": cert_file, "key": key_file}
    if not any(files.values()):
        return None
    missing = [what for what, path in files.items() if not path]
    if missing:
        raise ValueError(f"Dask TLS needs the CA, certificate and key files; the "
                         f"{' and '.join(missing)} file is missing")
    return Security(tls_ca_file=ca_file, tls_client_cert=cert_file,
                    tls_client_key=key_file, require_encryption=True)


@contextlib.contextmanager
def batch_client(*, address: str = "", security: Security | None = None,
                 workers: int = 0, processes: bool = True,
                 timeout_s: float = 30.0) -> Iterator[Client]:
    """A client of the scheduler at ``address``, or of a LocalCluster started here and
    closed on exit (``workers`` processes, 0 = one per core; ``processes=False``: threads
    of this process, for tests and small machines)."""
    if address:
        client = Client(address, security=security, timeout=timeout_s,
                        set_as_default=False)
        try:
            yield client
        finally:
            client.close()
        return
    with local_cluster(workers=workers, processes=processes, security=security) as cluster, \
            Client(cluster, timeout=timeout_s, set_as_default=False) as client:
        yield client


def local_cluster(*, workers: int = 0, processes: bool = True,
                  security: Security | None = None) -> LocalCluster:
    """A LocalCluster of ``workers`` (0 = one per core), one thread each, its scheduler's
    HTTP on a free loopback port (:data:`LOCAL_HTTP`)."""
    # worker processes get OMP/MKL/OPENBLAS_NUM_THREADS=1 from dask's pre-spawn-environ
    return LocalCluster(n_workers=workers or os.cpu_count() or 1, threads_per_worker=1,
                        processes=processes, dashboard_address=LOCAL_HTTP,
                        security=security, scheduler_port=0)


def chunk_size_for(groups: int, workers: int) -> int:
    """About four tasks per worker (for balance and progress), at most MAX_CHUNK groups
    per task."""
    return max(1, min(MAX_CHUNK, math.ceil(groups / max(1, 4 * workers))))


def _chunk_failure(chunk: Sequence[GroupArrays], exc: BaseException) -> list[GroupForecast]:
    if isinstance(exc, KilledWorker):
        reason = ("the worker process running this group's task died on every attempt "
                  "(out of memory, or killed); the group was not forecast: give the "
                  "workers more memory, fewer draws or a smaller chunk size")
        return [failed(g, "WorkerLost", reason) for g in chunk]
    kind = type(exc).__name__
    return [failed(g, kind, f"the task failed after its retries: {exc}") for g in chunk]


def run_batch(client: Client, groups: Sequence[GroupArrays], spec: ForecastSpec, *,
              chunk_size: int = 0, retries: int = 2, progress: Progress | None = None,
              timeout_s: float | None = None,
              chunk_function: ChunkFunction = forecast_chunk) -> list[GroupForecast]:
    """Forecast every group on the cluster; the outcomes in the order of ``groups``.

    ``chunk_size`` groups per task (0 = :func:`chunk_size_for`); ``progress(done,
    total)`` counts groups as their outcomes arrive, and may raise to stop the batch
    (the remaining tasks are cancelled); past ``timeout_s`` seconds (None: no limit) the
    batch stops with :class:`TimeoutError`. ``chunk_function`` is the task (a test seam).

    A chunk whose workers kept dying is sent again one group per task, once, so that
    only the group that kills its worker is lost, not its neighbours in the chunk.
    """
    if not groups:
        return []
    if len({g.key for g in groups}) < len(groups):
        raise ValueError("every group needs its own key")
    workers = len(client.scheduler_info().get("workers", {})) or 1
    size = chunk_size or chunk_size_for(len(groups), workers)
    token = uuid.uuid4().hex

    def submit(chunk: list[GroupArrays], name: str) -> Any:
        return client.submit(chunk_function, chunk, spec, key=f"fanfold-batch-{token}-{name}",
                             retries=retries, pure=False)

    owner = {submit(list(groups[i:i + size]), str(i // size)): list(groups[i:i + size])
             for i in range(0, len(groups), size)}
    outcomes: dict[tuple[str, ...], GroupForecast] = {}
    stream = as_completed(list(owner), loop=client.loop, timeout=timeout_s)
    try:
        for future in stream:
            chunk = owner.pop(future)
            # waits if the result was lost with a worker meanwhile and is recomputed
            exc = _error_of(future, timeout_s)
            if exc is None:
                got = _matched(chunk, future.result(timeout=timeout_s))
            else:
                if isinstance(exc, KilledWorker) and len(chunk) > 1:
                    for j, group in enumerate(chunk):  # find the group that kills
                        single = submit([group], f"{future.key.rsplit('-', 1)[-1]}.{j}")
                        owner[single] = [group]
                        stream.add(single)
                    future.release()
                    continue
                got = _chunk_failure(chunk, exc)
            future.release()
            outcomes.update((g.key, g) for g in got)
            if progress is not None:
                progress(len(outcomes), len(groups))
            checkpoint()  # a job past its time limit stops here
    finally:
        if owner:
            client.cancel(list(owner))
    return [outcomes.get(g.key) or failed(g, "MissingResult", "no outcome arrived")
            for g in groups]


def _error_of(future: Any, timeout_s: float | None) -> BaseException | None:
    """The task's error once it is done, or None when it succeeded."""
    try:
        return future.exception(timeout=timeout_s)
    except TimeoutError:
        raise
    except (Exception, asyncio.CancelledError) as raised:  # a cancelled future raises
        return raised


def _matched(chunk: Sequence[GroupArrays], got: Sequence[GroupForecast]
             ) -> list[GroupForecast]:
    """The task's outcomes checked against its chunk: one per group, in order (a group
    without one is reported, never dropped)."""
    by_key = {g.key: g for g in got}
    return [by_key.get(g.key) or failed(g, "MissingResult",
                                        "the task returned no outcome for this group")
            for g in chunk]
