"""``create_app(settings)``: the FastAPI application. Nothing runs at import time."""

from __future__ import annotations

import functools
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from importlib.resources import files
from typing import Any

from fastapi import Depends, FastAPI, Response
from fastapi.concurrency import run_in_threadpool
from fastapi.middleware.cors import CORSMiddleware
from fastapi.openapi.docs import get_swagger_ui_html
from fastapi.openapi.utils import get_openapi
from fastapi.responses import HTMLResponse, JSONResponse
from starlette.exceptions import HTTPException

from priors import warm_up_kernels

from .api.routes import (
    backtests,
    batches,
    chart_images,
    forecasts,
    health,
    jobs,
    models,
    page,
    planning,
)
from .auth import authenticate
from .compute.engine import limit_blas_threads
from .compute.limits import SWEEP_COST
from .config import Settings, get_settings
from .db import make_engine, make_session_factory
from .errors import register_error_handlers
from .jobs import JobRunner
from .logs import configure_logging
from .metrics import Metrics, MetricsMiddleware
from .middleware import BodyLimitMiddleware, LoadShedMiddleware, RequestIdMiddleware
from .migrate import upgrade
from .ratelimit import RateLimiter, enforce_rate_limit
from .schemas import ForecastCreate

__all__ = ["create_app"]

_EXPOSED = ["ETag", "Location", "Retry-After", "Link", "X-Request-ID"]


def served_app() -> FastAPI:
    """The factory ``fanfold serve`` gives uvicorn: JSON logs on stdout, then the app.

    uvicorn calls it in every worker process; with ``--workers`` > 1 the workers are
    fresh interpreters that inherit no logging set-up from the command, so each one
    configures its own here (otherwise their request lines and errors would be lost).
    """
    configure_logging()
    return create_app()


def create_app(settings: Settings | None = None) -> FastAPI:
    """Build the service for ``settings`` (default: from the environment)."""
    settings = settings or get_settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        limit_blas_threads(settings.blas_threads)
        # the compiled kernels: about 5 s on a machine's first start, 0.2 s from the cache
        await run_in_threadpool(warm_up_kernels)
        upgrade(app.state.engine)  # schema at the newest revision before taking requests
        app.state.jobs.start()  # re-queues jobs a crash left running, then works the queue
        app.state.ready = True
        yield
        app.state.ready = False
        app.state.jobs.stop()
        app.state.engine.dispose()

    app = FastAPI(
        title="Fanfold",
        version="0.1.0",
        summary="Probabilistic forecasts of related demand series (Bayesian VAR)",
        description=_limits(settings),
        lifespan=lifespan,
        docs_url=None,  # added below, behind the API key when keys are configured
        redoc_url=None,
        openapi_url=None,
    )
    app.state.settings = settings
    app.state.metrics = Metrics()
    app.state.ready = False
    app.state.engine = make_engine(settings.database_url)
    app.state.sessions = make_session_factory(app.state.engine)
    app.state.jobs = JobRunner(app.state.sessions, settings, app.state.metrics)
    register_error_handlers(app)
    app.state.api_keys = {k.id: k for k in settings.api_keys}
    app.include_router(health.router)  # probes stay open
    app.state.rate_limiter = (RateLimiter(settings.rate_limit_per_minute,
                                          settings.rate_limit_burst)
                              if settings.rate_limit_per_minute > 0 else None)
    protected = [Depends(authenticate), Depends(enforce_rate_limit)]
    app.include_router(health.metrics_router, dependencies=protected)
    app.include_router(forecasts.router, dependencies=protected)
    app.include_router(models.router, dependencies=protected)
    app.include_router(chart_images.router, dependencies=protected)
    app.include_router(planning.router, dependencies=protected)
    app.include_router(jobs.router, dependencies=protected)
    app.include_router(backtests.router, dependencies=protected)
    app.include_router(batches.router, dependencies=protected)
    if settings.docs_enabled:
        _add_docs(app, protected)
    if settings.page_enabled:
        app.include_router(page.router)  # static files; the page calls /v1 with the key
    # added last = outermost: ids first, then limits, then metrics around the routes
    if settings.max_in_flight:
        app.add_middleware(LoadShedMiddleware, max_in_flight=settings.max_in_flight)
    app.add_middleware(MetricsMiddleware, metrics=app.state.metrics)
    app.add_middleware(BodyLimitMiddleware, max_bytes=settings.max_body_bytes,
                       path_limits={"/v1/batches": settings.max_batch_body_bytes})
    if settings.cors_origins:
        app.add_middleware(CORSMiddleware, allow_origins=settings.cors_origins,
                           allow_methods=["GET", "POST", "DELETE"],
                           allow_headers=["X-API-Key", "If-None-Match", "Idempotency-Key",
                                          "Content-Type", "X-Request-ID"],
                           expose_headers=_EXPOSED)
    app.add_middleware(RequestIdMiddleware)
    app.openapi = lambda: _openapi(app)  # type: ignore[method-assign]
    return app


def _limits(settings: Settings) -> str:
    """This server's request limits, for the OpenAPI description."""
    rows = [
        ("body", f"{settings.max_body_bytes} bytes", "FANFOLD_MAX_BODY_BYTES"),
        ("series", str(settings.max_series), "FANFOLD_MAX_SERIES"),
        ("observations per series", str(settings.max_observations),
         "FANFOLD_MAX_OBSERVATIONS"),
        ("lags", str(settings.max_lags), "FANFOLD_MAX_LAGS"),
        ("coefficients, series x (series x lags + terms)", str(settings.max_coefficients),
         "FANFOLD_MAX_COEFFICIENTS"),
        ("draws", str(settings.max_draws), "FANFOLD_MAX_DRAWS"),
        ("horizon", str(settings.max_horizon), "FANFOLD_MAX_HORIZON"),
        ("quantiles", str(settings.max_quantiles), "FANFOLD_MAX_QUANTILES"),
        ("path values, draws x horizon x series", str(settings.max_path_values),
         "FANFOLD_MAX_PATH_VALUES"),
        ("Gibbs work (prior 'independent'), chains x (burn + keep x thin) x (series x "
         f"coefficients per equation^2 + {SWEEP_COST})", f"{settings.max_gibbs_work:.3g}",
         "FANFOLD_MAX_GIBBS_WORK"),
        ("stored Gibbs draws, chains x keep x (coefficients + series^2) values",
         str(settings.max_stored_draws), "FANFOLD_MAX_STORED_DRAWS"),
        ("Gibbs work answered at once (above it POST /v1/models runs a job and the "
         "one-shot POST /v1/forecasts refuses the fit)", f"{settings.sync_max_gibbs_work:.3g}",
         "FANFOLD_SYNC_MAX_GIBBS_WORK"),
        ("request time", f"{settings.request_timeout_s:g} s", "FANFOLD_REQUEST_TIMEOUT_S"),
    ]
    head = ("Limits of this server: a request over one is a 422 problem naming the field "
            "(413 for the body, 503 past the request time).")
    return head + "\n\n" + "\n".join(f"- {what}: {value} (`{env}`)" for what, value, env in rows)


SWAGGER_UI_VERSION = "5.35.0"  # service/static/docs/VENDORED.md


@functools.cache
def _asset(name: str) -> bytes:
    return (files("service.static") / "docs" / name).read_bytes()


_DOCS_ASSETS = {
    name: (media, functools.partial(_asset, name)) for name, media in (
        ("swagger-ui-bundle.js", "text/javascript"), ("swagger-ui.css", "text/css"),
        ("favicon-32x32.png", "image/png"))
}


def _add_docs(app: FastAPI, dependencies: list[Any]) -> None:
    @app.get("/openapi.json", include_in_schema=False, dependencies=dependencies)
    def openapi_document() -> JSONResponse:
        return JSONResponse(app.openapi())

    @app.get("/docs", include_in_schema=False, dependencies=dependencies)
    def docs() -> HTMLResponse:
        # the page's scripts come from this server (service/static/docs), not from a
        # public web address: /docs works offline and leaks nothing
        return get_swagger_ui_html(openapi_url="/openapi.json", title="Fanfold API",
                                   swagger_js_url="/docs/assets/swagger-ui-bundle.js",
                                   swagger_css_url="/docs/assets/swagger-ui.css",
                                   swagger_favicon_url="/docs/assets/favicon-32x32.png")

    @app.get("/docs/assets/{name}", include_in_schema=False, dependencies=dependencies)
    def docs_asset(name: str) -> Response:
        if name not in _DOCS_ASSETS:
            raise HTTPException(404, f"no asset {name!r}")
        media, data = _DOCS_ASSETS[name]
        return Response(data(), media_type=media,
                        headers={"Cache-Control": "public, max-age=86400, immutable",
                                 "ETag": f'"swagger-ui-{SWAGGER_UI_VERSION}-{name}"'})


def _openapi(app: FastAPI) -> dict[str, object]:
    """FastAPI's document plus the request schemas that routes read from the raw body."""
    if app.openapi_schema is None:
        schema = get_openapi(title=app.title, version=app.version, summary=app.summary,
                             description=app.description, routes=app.routes)
        extra = ForecastCreate.model_json_schema(ref_template="#/components/schemas/{model}")
        components = schema.setdefault("components", {}).setdefault("schemas", {})
        components.update(extra.pop("$defs", {}))
        components["ForecastCreate"] = extra
        _problem_responses(schema)
        app.openapi_schema = schema
    return app.openapi_schema


_PROBLEM_SCHEMA = {
    "title": "Problem",
    "description": "RFC 9457 problem details",
    "type": "object",
    "required": ["type", "title", "status", "detail"],
    "properties": {
        "type": {"type": "string"},
        "title": {"type": "string"},
        "status": {"type": "integer"},
        "detail": {"type": "string"},
        "instance": {"type": "string"},
        "request_id": {"type": "string"},
        "errors": {"type": "array", "items": {
            "type": "object", "required": ["field", "message"],
            "properties": {"field": {"type": "string"}, "message": {"type": "string"}}}},
    },
}


def _problem_responses(schema: dict[str, Any]) -> None:
    """Every error response is application/problem+json with the Problem schema."""
    components = schema["components"]["schemas"]
    components["Problem"] = _PROBLEM_SCHEMA
    for name in ("HTTPValidationError", "ValidationError"):
        components.pop(name, None)
    ref = {"application/problem+json": {"schema": {"$ref": "#/components/schemas/Problem"}}}
    for path, methods in schema["paths"].items():
        for op in methods.values():
            responses = op.setdefault("responses", {})
            if "requestBody" in op:
                responses.setdefault("400", {"description": "the body is not valid JSON"})
            if path.startswith("/v1/") or path == "/metrics":
                responses.setdefault("401", {"description": "missing or invalid API key "
                                                            "(when keys are configured)"})
                responses.setdefault("429", {"description": "over the rate limit; see "
                                                            "Retry-After"})
                responses.setdefault("503", {"description": "overloaded (too many requests "
                                                            "in flight) or past the request "
                                                            "time; see Retry-After"})
            for code, response in responses.items():
                if code.isdigit() and int(code) >= 400:
                    response["content"] = ref
