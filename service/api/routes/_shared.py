"""Helpers shared by the model routes: lookup, timeouts, band lists and ETags."""

from __future__ import annotations

import asyncio
import hashlib
import uuid
from typing import Any, Protocol

from fastapi import Request, Response
from fastapi.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException

from priors import CancelToken, WorkCancelled, cancel_scope

from ...errors import PROBLEM_JSON, RequestTimedOut
from ...orm import StoredModel
from ...responses import JSONResponse
from ...store import get_model

NOT_FOUND = {404: {"description": "no such model for this caller",
                   "content": {PROBLEM_JSON: {}}}}
INVALID = {422: {"description": "invalid input or a limit exceeded",
                 "content": {PROBLEM_JSON: {}}},
           503: {"description": "the work took longer than the request timeout; it was "
                                "stopped (Retry-After)",
                 "content": {PROBLEM_JSON: {}}}}
NOT_MODIFIED = {304: {"description": "unchanged since the ETag given"}}


def row_or_404(session: Any, tenant: str, model_id: uuid.UUID) -> StoredModel:
    row = get_model(session=session, tenant=tenant, model_id=str(model_id))
    if row is None:
        raise HTTPException(404, f"model {model_id} not found")
    return row


def _scoped(token: CancelToken, fn: Any, *args: Any) -> Any:
    with cancel_scope(token):  # in the worker thread: the engine's checkpoints see it
        return fn(*args)


async def timed(settings: Any, fn: Any, *args: Any) -> Any:
    """Run blocking work in the thread pool under the request timeout.

    Past ``settings.request_timeout_s`` the answer is a 503 problem
    (:class:`service.errors.RequestTimedOut`) and the work is told to stop: it runs under
    a :class:`priors.CancelToken` with the same deadline, which the engine checks between
    sweeps and steps (:mod:`priors.cancellation`), so no core stays busy for a request
    nobody waits for.
    """
    limit = settings.request_timeout_s
    token = CancelToken(deadline_s=limit)
    try:
        return await asyncio.wait_for(run_in_threadpool(_scoped, token, fn, *args),
                                      timeout=limit)
    except (TimeoutError, WorkCancelled):
        token.cancel("the request timed out")
        raise RequestTimedOut(limit) from None


def parse_bands(text: str) -> list[float]:
    """"50,80,95" -> [50.0, 80.0, 95.0]; 422 unless every value is in (0, 100)."""
    try:
        values = sorted({float(b) for b in text.split(",") if b.strip()})
    except ValueError:
        values = []
    if not values or not all(0 < v < 100 for v in values):
        raise HTTPException(422, f"bands must be percentages between 0 and 100 like "
                                 f"50,80,95; got {text!r}")
    return values


class Versioned(Protocol):
    """A model row, or just its id and version."""

    id: str
    version: int


def etag_for(row: Versioned, *parts: object) -> tuple[str, dict[str, str]]:
    """A weak ETag of the model's version and the query, with its caching headers. The
    answers behind it are deterministic (fixed seed), so equal tags mean equal bodies."""
    key = "|".join([row.id, str(row.version), *map(str, parts)])
    etag = f'W/"{hashlib.sha256(key.encode()).hexdigest()[:32]}"'
    return etag, {"ETag": etag, "Cache-Control": "private, no-cache"}


def not_modified(request: Request, etag: str) -> bool:
    """Whether If-None-Match matches ``etag`` (RFC 9110 sec. 13.1.2, weak comparison)."""
    given = request.headers.get("if-none-match", "")
    return given.strip() == "*" or etag in [t.strip() for t in given.split(",")]


async def cached_model_answer(request: Request, row: StoredModel, settings: Any,
                              key: tuple[object, ...], work: Any) -> Response:
    """A GET answer about a stored model, deterministic in ``key``: 304 when
    If-None-Match has its ETag, else ``work()`` under the request timeout, with the
    model's id and version and the caching headers."""
    etag, headers = etag_for(row, *key)
    if not_modified(request, etag):
        return Response(status_code=304, headers=headers)
    answer = await timed(settings, work)
    return JSONResponse({"model_id": row.id, "version": row.version, **answer},
                        headers=headers)
