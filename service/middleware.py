"""ASGI middleware: request ids, the request-body size limit and load shedding.

All are plain ASGI (no BaseHTTPMiddleware), so streamed bodies are counted as they
arrive and nothing is buffered twice.
"""

from __future__ import annotations

import json
import logging
import re
import uuid
from typing import Any

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from .context import request_id

__all__ = ["BodyLimitMiddleware", "LoadShedMiddleware", "RequestIdMiddleware"]

log = logging.getLogger("fanfold.service")
_VALID_ID = re.compile(r"^[A-Za-z0-9._\-]{1,128}$")


async def _send_problem(send: Send, status: int, title: str, detail: str,
                        headers: dict[str, str] | None = None) -> None:
    """A problem-details response written straight to ASGI (outside the app's handlers)."""
    body = json.dumps({"type": "about:blank", "title": title, "status": status,
                       "detail": detail, "request_id": request_id.get()}).encode()
    await send({"type": "http.response.start", "status": status, "headers": [
        (b"content-type", b"application/problem+json"),
        (b"content-length", str(len(body)).encode()),
        *((k.lower().encode("latin-1"), v.encode("latin-1"))
          for k, v in (headers or {}).items()),
    ]})
    await send({"type": "http.response.body", "body": body})


class RequestIdMiddleware:
    """Echo a well-formed ``X-Request-ID`` or mint a UUID4; expose it to handlers and logs.

    Outermost layer, so it also turns any exception that escaped the app into a 500
    problem response that carries the id and no internals (the exception is logged).
    """

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        given = dict(scope.get("headers", [])).get(b"x-request-id", b"").decode("latin-1")
        rid = given if _VALID_ID.match(given) else str(uuid.uuid4())
        token = request_id.set(rid)

        started = False

        async def send_with_id(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
                headers = list(message.get("headers", []))
                headers.append((b"x-request-id", rid.encode("latin-1")))
                message["headers"] = headers
            await send(message)

        try:
            await self.app(scope, receive, send_with_id)
        except Exception:
            log.exception("unhandled error", extra={"request_id": rid})
            if started:
                raise
            await _send_problem(send_with_id, 500, "Internal Server Error",
                                "an unexpected error occurred; quote the request_id when "
                                "reporting it")
        finally:
            request_id.reset(token)


class _TooLarge(Exception):
    pass


class BodyLimitMiddleware:
    """Refuse request bodies over ``max_bytes`` with a 413 problem response.

    Checks Content-Length first, then counts the bytes actually received (a client can
    omit or understate the header). ``path_limits`` gives some paths their own limit
    (a batch's long table is larger than one model's data).
    """

    def __init__(self, app: ASGIApp, max_bytes: int,
                 path_limits: dict[str, int] | None = None) -> None:
        self.app = app
        self.max_bytes = max_bytes
        self.path_limits = path_limits or {}

    async def _reject(self, send: Send, limit: int) -> None:
        await _send_problem(send, 413, "Content Too Large",
                            f"the request body is larger than the limit of {limit} "
                            "bytes; send fewer observations or series")

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        limit = self.path_limits.get(scope.get("path", ""), self.max_bytes)
        length = dict(scope.get("headers", [])).get(b"content-length")
        if length is not None and length.isdigit() and int(length) > limit:
            await self._reject(send, limit)
            return
        received = 0
        started = False

        async def counting_receive() -> Message:
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > limit:
                    raise _TooLarge
            return message

        async def tracking_send(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, counting_receive, tracking_send)
        except _TooLarge:
            if not started:
                await self._reject(send, limit)


class LoadShedMiddleware:
    """Answer 503 with Retry-After at once when ``max_in_flight`` requests are already
    being answered in this process (overload: many tenants together, each within its
    rate limit), instead of letting them pile up in the thread pool (fits, fan charts,
    forecasts above ``inline_max_cost``). The probes and /metrics are never shed.

    Not covered: small one-shot forecasts run on the event loop, one after the other,
    so they are never "in flight" together; at twice the capacity their excess waits in
    uvicorn before the app sees it (tests/benchmarks/results/load.md, "(c')": answers
    took seconds, and 10 s client time-outs occurred without the per-tenant rate limit).
    """

    EXEMPT = frozenset({"/livez", "/readyz", "/metrics"})
    RETRY_AFTER_S = 1

    def __init__(self, app: ASGIApp, max_in_flight: int) -> None:
        self.app = app
        self.max_in_flight = max_in_flight
        self.in_flight = 0  # one event loop per process: no lock needed

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["path"] in self.EXEMPT:
            await self.app(scope, receive, send)
            return
        if self.in_flight >= self.max_in_flight:
            await _send_problem(send, 503, "Service Unavailable",
                                f"this server is answering {self.in_flight} requests, its "
                                f"limit; retry after {self.RETRY_AFTER_S} s",
                                headers={"Retry-After": str(self.RETRY_AFTER_S)})
            return
        self.in_flight += 1
        try:
            await self.app(scope, receive, send)
        finally:
            self.in_flight -= 1


def header(scope: dict[str, Any], name: bytes) -> str | None:
    """A request header's value from an ASGI scope (latin-1), or None."""
    value = dict(scope.get("headers", [])).get(name)
    return None if value is None else value.decode("latin-1")
