"""Helpers shared by the service tests."""

from __future__ import annotations

import contextlib
import time


def wait_for_job(client, location: str, timeout: float = 60.0) -> dict:
    """Poll a job until it ends (bounded); its last JSON."""
    deadline = time.monotonic() + timeout
    job: dict = {}
    while time.monotonic() < deadline:
        job = client.get(location).json()
        if job["status"] in ("succeeded", "failed", "cancelled"):
            return job
        time.sleep(0.05)
    raise AssertionError(f"job not finished within {timeout} s: {job}")


@contextlib.contextmanager
def dask_cluster(workers: int, *, processes: bool = True, config: dict | None = None):
    """A client of a LocalCluster of ``workers`` (one thread each, HTTP on a free loopback
    port), waited for and closed with bounded waits; ``config``: dask settings the
    cluster starts with."""
    import dask
    from distributed import Client, LocalCluster

    with dask.config.set(config or {}):
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=processes,
                               dashboard_address="127.0.0.1:0", scheduler_port=0)
    client = Client(cluster, timeout=60, set_as_default=False)
    try:
        client.wait_for_workers(workers, timeout=60)
        yield client
    finally:
        client.close(timeout=30)
        cluster.close(timeout=30)
