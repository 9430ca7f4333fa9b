"""Prometheus metrics (prometheus-client): one registry per app, or per server.

Names follow the Prometheus conventions: ``fanfold_`` prefix, base units, ``_total``
counters, bounded labels (the route template, never the raw path).

Two modes, chosen by prometheus-client's own variable ``PROMETHEUS_MULTIPROC_DIR``:

- Not set (one process, and the tests, which build many apps in one process): each
  :class:`Metrics` has its collectors on its own registry.
- Set (``fanfold serve --workers N``): every worker process writes its values to
  memory-mapped files in that directory and ``/metrics`` answers the sum over all of
  them (``prometheus_client.multiprocess.MultiProcessCollector``), whichever worker
  takes the scrape. The collectors are then made once per process and registered on no
  registry (the client's multiprocess docs: a collector on the registry that also holds
  the MultiProcessCollector would be exported twice). The client picks its file-backed
  values when it is imported, so the variable must be in the environment before the
  process starts (:class:`Metrics` refuses a variable set later). ``fanfold serve``
  creates the directory and deletes the last run's files (:func:`prepare_multiprocess_dir`).

No ``multiprocess.mark_process_dead`` on worker exit: it only deletes the files of
``live*`` gauges, and the service has none. The counters and histograms of an exited
worker must keep counting in the sums (they are totals since start; a restarted worker
gets a new pid and new files). uvicorn has no per-worker exit hook like gunicorn's
``child_exit`` either; a future live gauge would need one (tests/service/
test_metrics_multiprocess.py fails if a gauge appears).
"""

from __future__ import annotations

import functools
import glob
import logging
import os
import time
from dataclasses import dataclass

from prometheus_client import CollectorRegistry, Counter, Histogram, values
from prometheus_client.multiprocess import MultiProcessCollector
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from .context import request_id

__all__ = ["MULTIPROC_ENV", "Metrics", "MetricsMiddleware", "multiprocess_dir",
           "prepare_multiprocess_dir"]

log = logging.getLogger("fanfold.access")

MULTIPROC_ENV = "PROMETHEUS_MULTIPROC_DIR"
_SECONDS = (0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60)


def multiprocess_dir() -> str | None:
    """The directory of the multiprocess metrics files, or None in one-process mode."""
    return os.environ.get(MULTIPROC_ENV) or None


def prepare_multiprocess_dir() -> str | None:
    """Create ``PROMETHEUS_MULTIPROC_DIR`` and delete the ``*.db`` files a previous run
    left there (the client's docs: wipe it before start-up, else the old values add to
    the new ones). For the supervisor, before any worker starts; a directory serves one
    server at a time. Does nothing and returns None when the variable is not set."""
    path = multiprocess_dir()
    if path is None:
        return None
    os.makedirs(path, exist_ok=True)
    for stale in glob.glob(os.path.join(path, "*.db")):
        os.remove(stale)
    return path


@dataclass(frozen=True)
class _Collectors:
    requests: Counter
    duration: Histogram
    fit: Histogram
    jobs_recovered: Counter
    forecast: Histogram


def _collectors(registry: CollectorRegistry | None) -> _Collectors:
    return _Collectors(
        requests=Counter(
            "fanfold_http_requests_total", "HTTP requests by method, route and status",
            ["method", "route", "status"], registry=registry),
        duration=Histogram(
            "fanfold_http_request_duration_seconds", "HTTP request duration",
            ["method", "route"], registry=registry, buckets=_SECONDS),
        fit=Histogram(
            "fanfold_fit_duration_seconds", "Engine time of model fits (requests and jobs)",
            registry=registry, buckets=(*_SECONDS, 300)),
        jobs_recovered=Counter(
            "fanfold_jobs_recovered_total", "Running jobs whose lease ran out (worker lost)",
            registry=registry),
        forecast=Histogram(
            "fanfold_forecast_duration_seconds", "Engine time of one-shot forecasts",
            registry=registry, buckets=_SECONDS),
    )


@functools.cache
def _process_collectors(path: str) -> _Collectors:
    """Multiprocess mode: one set per process, on no registry (values go to ``path``)."""
    return _collectors(None)


def _file_backed() -> bool:
    """Whether prometheus-client chose file-backed values when it was imported."""
    return bool(getattr(values.ValueClass, "_multiprocess", False))


def _check_multiprocess(path: str | None) -> None:
    if path is None:
        if _file_backed():  # set but empty, or removed after the import
            raise RuntimeError(f"{MULTIPROC_ENV} is empty; set it to a directory or unset "
                               "it before the server starts")
        return
    if not _file_backed():
        raise RuntimeError(
            f"{MULTIPROC_ENV} was set after prometheus_client was imported, so this "
            "process keeps its metrics in memory; set it in the environment before the "
            "server starts")
    if not os.path.isdir(path):
        raise RuntimeError(f"{MULTIPROC_ENV}={path!r} is not a directory; create it "
                           "(`fanfold serve` does) before the server starts")


class Metrics:
    """The service's collectors and the registry ``/metrics`` exports.

    ``multiprocess`` tells the mode (module docstring); in it, ``registry`` holds only
    the MultiProcessCollector, which reads every process's files at each scrape.
    """

    def __init__(self) -> None:
        path = multiprocess_dir()
        _check_multiprocess(path)
        self.multiprocess = path is not None
        self.registry = CollectorRegistry()
        if path is None:
            c = _collectors(self.registry)
        else:
            c = _process_collectors(path)
            MultiProcessCollector(self.registry, path=path)
        self.requests = c.requests
        self.duration = c.duration
        self.fit = c.fit
        self.jobs_recovered = c.jobs_recovered
        self.forecast = c.forecast


class MetricsMiddleware:
    """Count requests, time them by route template, and log one line per request."""

    def __init__(self, app: ASGIApp, metrics: Metrics) -> None:
        self.app = app
        self.metrics = metrics

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        start = time.perf_counter()
        status = 500

        async def recording_send(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = message["status"]
            await send(message)

        try:
            await self.app(scope, receive, recording_send)
        finally:
            route = getattr(scope.get("route"), "path", "unmatched")
            method = scope.get("method", "GET")
            elapsed = time.perf_counter() - start
            self.metrics.requests.labels(method, route, str(status)).inc()
            self.metrics.duration.labels(method, route).observe(elapsed)
            log.info("request", extra={"method": method, "route": route, "status": status,
                                       "duration_s": round(elapsed, 6),
                                       "request_id": request_id.get()})
