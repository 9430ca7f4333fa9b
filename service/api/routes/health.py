"""Probes and metrics: ``/livez``, ``/readyz``, ``/metrics``."""

from __future__ import annotations

from fastapi import APIRouter, Request, Response
from prometheus_client import CONTENT_TYPE_LATEST, generate_latest

from ...errors import problem
from ..deps import MetricsDep

router = APIRouter(tags=["operations"])


@router.get("/livez", summary="Liveness: the process answers")
def livez() -> dict[str, str]:
    return {"status": "ok"}


@router.get("/readyz", summary="Readiness: the service can take requests",
            responses={503: {"description": "not ready (starting or draining)"}})
def readyz(request: Request) -> Response:
    if not getattr(request.app.state, "ready", False):
        return problem(503, "the service is starting or shutting down", request=request)
    return Response('{"status":"ready"}', media_type="application/json")


metrics_router = APIRouter(tags=["operations"])


@metrics_router.get("/metrics", summary="Prometheus metrics", response_class=Response)
def metrics(m: MetricsDep) -> Response:
    return Response(generate_latest(m.registry), media_type=CONTENT_TYPE_LATEST)
