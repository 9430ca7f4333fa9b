"""Prometheus metrics (prometheus-client), one registry per app.

Names follow the Prometheus conventions: ``fanfold_`` prefix, base units, ``_total``
counters, bounded labels (the route template, never the raw path).
"""

from __future__ import annotations

import logging
import time

from prometheus_client import CollectorRegistry, Counter, Histogram
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from .context import request_id

__all__ = ["Metrics", "MetricsMiddleware"]

log = logging.getLogger("fanfold.access")


class Metrics:
    """The service's collectors, registered on their own registry."""

    def __init__(self) -> None:
        self.registry = CollectorRegistry()
        self.requests = Counter(
            "fanfold_http_requests_total", "HTTP requests by method, route and status",
            ["method", "route", "status"], registry=self.registry)
        self.duration = Histogram(
            "fanfold_http_request_duration_seconds", "HTTP request duration",
            ["method", "route"], registry=self.registry,
            buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60))
        self.fit = Histogram(
            "fanfold_fit_duration_seconds", "Engine time of model fits (requests and jobs)",
            registry=self.registry,
            buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60, 300))
        self.jobs_recovered = Counter(
            "fanfold_jobs_recovered_total", "Running jobs whose lease ran out (worker lost)",
            registry=self.registry)
        self.forecast = Histogram(
            "fanfold_forecast_duration_seconds", "Engine time of one-shot forecasts",
            registry=self.registry,
            buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60))


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
