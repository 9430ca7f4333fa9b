"""Errors as RFC 9457 problem details, in one place.

Every error response is ``application/problem+json`` with ``type``, ``title``,
``status``, ``detail``, ``instance`` and the extensions ``request_id`` and (for invalid
input) ``errors: [{field, message}]``. Engine exceptions (:mod:`priors.errors`) map to
4xx with the engine's message; anything unexpected is a 500 without internals.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from http import HTTPStatus
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from sqlalchemy.orm.exc import StaleDataError
from starlette.exceptions import HTTPException as StarletteHTTPException

from priors.errors import NotFittedError, PriorsError, TimeIndexError, WorkCancelled

from .context import request_id
from .responses import JSONResponse

__all__ = ["PROBLEM_JSON", "InvalidField", "LimitExceeded", "RequestTimedOut", "problem",
           "register_error_handlers"]

PROBLEM_JSON = "application/problem+json"


class RequestTimedOut(Exception):
    """The work of a request ran past the request timeout and was stopped (503)."""

    def __init__(self, limit_s: float) -> None:
        super().__init__(f"the request took longer than this server's limit of "
                         f"{limit_s:g} s and was stopped")
        self.limit_s = limit_s


class InvalidField(Exception):
    """A request field that is invalid in a way the schema cannot tell (422, names it)."""

    title = "Invalid request"

    def __init__(self, field: str, message: str) -> None:
        super().__init__(message)
        self.field = field
        self.message = message


class LimitExceeded(InvalidField):
    """A request over one of the configured limits (422, names the field)."""

    title = "Limit exceeded"


def problem(
    status: int,
    detail: str,
    *,
    request: Request | None = None,
    title: str | None = None,
    type_: str = "about:blank",
    errors: Sequence[dict[str, str]] | None = None,
    headers: dict[str, str] | None = None,
) -> JSONResponse:
    """A problem-details response."""
    body: dict[str, Any] = {
        "type": type_,
        "title": title or HTTPStatus(status).phrase,
        "status": status,
        "detail": detail,
    }
    if request is not None:
        body["instance"] = request.url.path
    rid = request_id.get()
    if rid:
        body["request_id"] = rid
    if errors:
        body["errors"] = list(errors)
    return JSONResponse(body, status_code=status, media_type=PROBLEM_JSON, headers=headers)


#: the names pydantic gives the branches of a union in an error's location ("lags.int",
#: "lags.literal['auto']"): not part of the field the caller wrote
_UNION_BRANCH = re.compile(r"^(int|float|str|bool|none|[a-z-]+\[.*\])$")


def _field(loc: Sequence[Any]) -> str:
    parts = [str(p) for p in loc if p not in ("body", "query")]
    parts = [p for i, p in enumerate(parts) if i == 0 or not _UNION_BRANCH.match(p)]
    return ".".join(parts) or "body"


async def _validation(request: Request, exc: RequestValidationError) -> JSONResponse:
    broken = [e for e in exc.errors() if e.get("type") == "json_invalid"]
    if broken:  # not JSON at all: a 400, as for every route (service.api.json_body)
        return problem(400, f"the body is not valid JSON: {broken[0].get('msg', '')}",
                       request=request)
    errors = [{"field": _field(e.get("loc", ())), "message": str(e.get("msg", "invalid"))}
              for e in exc.errors()]
    fields = ", ".join(sorted({e["field"] for e in errors}))
    return problem(422, f"the request is invalid: check {fields}", request=request,
                   title="Invalid request", errors=errors)


def _allowed_methods(request: Request) -> str | None:
    """Every method the documented routes of this path answer (RFC 9110 sec. 15.5.6: a
    405 lists them all; Starlette names only the first matching route's). Read from the
    OpenAPI document, which lists every route (tests/service/test_openapi.py)."""
    from starlette.routing import compile_path

    app = request.app
    table = getattr(app.state, "allowed_methods", None)
    if table is None:
        table = [(compile_path(path)[0], {m.upper() for m in ops})
                 for path, ops in app.openapi().get("paths", {}).items()]
        app.state.allowed_methods = table
    methods: set[str] = set()
    for regex, ops in table:
        if regex.match(request.url.path):
            methods |= ops
    return ", ".join(sorted(methods)) or None


async def _http(request: Request, exc: StarletteHTTPException) -> JSONResponse:
    detail = exc.detail if isinstance(exc.detail, str) else HTTPStatus(exc.status_code).phrase
    headers = dict(exc.headers or {})
    if exc.status_code == 405:
        allowed = _allowed_methods(request)
        if allowed:
            headers["Allow"] = allowed
    return problem(exc.status_code, detail, request=request, headers=headers or None)


async def _limit(request: Request, exc: InvalidField) -> JSONResponse:
    return problem(422, exc.message, request=request, title=exc.title,
                   errors=[{"field": exc.field, "message": exc.message}])


async def _engine(request: Request, exc: PriorsError) -> JSONResponse:
    status = 409 if isinstance(exc, NotFittedError) else 422
    name = type(exc).__name__
    # an engine error that knows which input to change names it as the field
    field = exc.argument if isinstance(exc, TimeIndexError) else None
    return problem(status, str(exc), request=request, title="The model cannot use this input",
                   type_=f"urn:fanfold:problem:{name}",
                   errors=None if field is None else [{"field": field, "message": str(exc)}])


async def _timed_out(request: Request, exc: Exception) -> JSONResponse:
    detail = (str(exc) if isinstance(exc, RequestTimedOut) else
              "the work was stopped before it finished")
    return problem(503, f"{detail}; ask for less (draws, horizon, sweeps, lags) or store "
                        "the model and use a job", request=request,
                   headers={"Retry-After": "5"})


async def _stale(request: Request, exc: StaleDataError) -> JSONResponse:
    return problem(409, "the model changed while this request was updating it; fetch it "
                        "again and retry", request=request)


def register_error_handlers(app: FastAPI) -> None:
    """Install the handlers: validation, HTTP, limits, engine errors.

    Anything else becomes a 500 problem in :class:`service.middleware.RequestIdMiddleware`.
    """
    app.add_exception_handler(RequestValidationError, _validation)  # type: ignore[arg-type]
    app.add_exception_handler(StarletteHTTPException, _http)  # type: ignore[arg-type]
    app.add_exception_handler(InvalidField, _limit)  # type: ignore[arg-type]
    app.add_exception_handler(PriorsError, _engine)  # type: ignore[arg-type]
    app.add_exception_handler(StaleDataError, _stale)  # type: ignore[arg-type]
    # Starlette looks a handler up along the exception's MRO: WorkCancelled gets this
    # one, not PriorsError's 422
    app.add_exception_handler(RequestTimedOut, _timed_out)
    app.add_exception_handler(WorkCancelled, _timed_out)
