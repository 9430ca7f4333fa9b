"""Probes and metrics: ``/livez``, ``/readyz``, ``/metrics``."""

from __future__ import annotations

from fastapi import APIRouter, Request, Response
from prometheus_client import CONTENT_TYPE_LATEST, generate_latest
from sqlalchemy.exc import SQLAlchemyError

from ...errors import problem
from ...migrate import at_head
from ..deps import MetricsDep

router = APIRouter(tags=["operations"])  # probes answer whatever the prober accepts


@router.get("/livez", summary="Liveness: the process answers")
def livez() -> dict[str, str]:
    return {"status": "ok"}


@router.get("/readyz", summary="Readiness: database reachable, schema current, the Dask "
                               "cluster reachable (if configured), not draining",
            responses={503: {"description": "not ready"}})
def readyz(request: Request) -> Response:
    if not getattr(request.app.state, "ready", False):
        return problem(503, "the service is starting or shutting down", request=request)
    try:
        with request.app.state.engine.connect() as conn:
            conn.exec_driver_sql("SELECT 1")
        current = at_head(request.app.state.engine)
    except SQLAlchemyError:
        return problem(503, "the database is not reachable", request=request,
                       headers={"Retry-After": "5"})
    if not current:
        return problem(503, "the database schema is not at the newest revision",
                       request=request)
    cluster = request.app.state.jobs.cluster_problem()
    if cluster is not None:
        return problem(503, cluster, request=request, headers={"Retry-After": "5"})
    return Response('{"status":"ready"}', media_type="application/json")


metrics_router = APIRouter(tags=["operations"])


@metrics_router.get("/metrics", summary="Prometheus metrics", response_class=Response)
def metrics(m: MetricsDep) -> Response:
    return Response(generate_latest(m.registry), media_type=CONTENT_TYPE_LATEST)
