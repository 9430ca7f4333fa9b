"""One way to read a JSON request body, for every route that takes one.

- Media type: ``application/json`` or ``application/*+json`` (or none given, read as
  JSON); anything else is a 415 problem (RFC 9110 sec. 15.5.16) on every route, not only
  on the one-shot forecast.
- A UTF-8 byte-order mark is ignored on every route (RFC 8259 sec. 8.1 lets a parser
  ignore it; one route accepted it and another refused it).
- Malformed JSON is a 400 problem saying where it breaks (it was a 422 naming a byte
  offset as the field on some routes), as the OpenAPI document says.
- A key that appears twice in one object is a 422 naming the key (JSON parsers keep the
  last one silently, so ``{"horizon": 3, "horizon": 30}`` meant 30 without a word).
- An Accept header that admits no JSON answer is a 406 (RFC 9110 sec. 15.5.7) on every
  route that answers JSON (``/metrics`` answers Prometheus text and is left alone).

:class:`JSONBodyRoute` applies this to FastAPI routes with a body model; the one-shot
forecast route, which also reads CSV, calls :func:`read_json` itself.
"""

from __future__ import annotations

import email.message
import json
from collections.abc import Callable, Coroutine
from typing import Any

from fastapi import Request, Response
from fastapi.responses import JSONResponse
from fastapi.routing import APIRoute
from starlette.exceptions import HTTPException

from ..errors import InvalidField

__all__ = ["BOM", "JSONBodyRoute", "accepts_json", "is_json_media_type", "read_json"]

BOM = b"\xef\xbb\xbf"


def accepts_json(accept: str | None) -> bool:
    """Whether an Accept header admits a JSON answer (absent: anything goes). The
    answers are application/json, or application/problem+json for errors."""
    if not accept or not accept.strip():
        return True
    for part in accept.split(","):
        media, *params = [p.strip() for p in part.split(";")]
        q = 1.0
        for param in params:
            name, _, value = param.partition("=")
            if name.strip().lower() == "q":
                try:
                    q = float(value)
                except ValueError:
                    q = 0.0
        media = media.lower()
        if q > 0 and (media in ("*/*", "application/*", "application/json",
                                "application/problem+json")
                      or (media.startswith("application/") and media.endswith("+json"))):
            return True
    return False


def is_json_media_type(content_type: str | None) -> bool:
    """Whether a Content-Type header names JSON (or is absent: read as JSON)."""
    if not content_type:
        return True
    message = email.message.Message()
    message["content-type"] = content_type
    main, sub = message.get_content_maintype(), message.get_content_subtype()
    return main == "application" and (sub == "json" or sub.endswith("+json"))


class DuplicateKey(InvalidField):
    """A JSON object with the same key twice (422 naming the key)."""


def _unique_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise DuplicateKey(key, f"{key}: this key appears twice in one JSON object; "
                                    "send it once")
        out[key] = value
    return out


def read_json(body: bytes) -> tuple[bytes, Any]:
    """The body without a byte-order mark, and its parsed value (``None`` when empty).

    Raises 400 (malformed JSON, not UTF-8) or :class:`DuplicateKey` (422).
    """
    if body.startswith(BOM):
        body = body[len(BOM):]
    if not body.strip():
        return body, None
    try:
        return body, json.loads(body, object_pairs_hook=_unique_keys)
    except json.JSONDecodeError as exc:
        raise HTTPException(400, f"the body is not valid JSON: {exc.msg} at line "
                                 f"{exc.lineno} column {exc.colno}") from None
    except UnicodeDecodeError:
        raise HTTPException(400, "the body is not UTF-8 text") from None


def unsupported_media_type(content_type: str) -> HTTPException:
    return HTTPException(415, f"content type {content_type!r} is not supported; send "
                              "application/json")


#: the answers every route with a JSON body may give about the body itself
BODY_RESPONSES: dict[int | str, dict[str, Any]] = {
    400: {"description": "the body is not valid JSON",
          "content": {"application/problem+json": {}}},
    415: {"description": "the body is not JSON (Content-Type)",
          "content": {"application/problem+json": {}}},
}


def _negotiate(request: Request) -> None:
    if not accepts_json(request.headers.get("accept")):
        raise HTTPException(406, "this resource answers application/json (errors: "
                                 "application/problem+json); the Accept header admits "
                                 "neither")


class JSONBodyRoute(APIRoute):
    """A route whose JSON body (if it has a body model) is read by :func:`read_json`
    before FastAPI validates it; its OpenAPI entry lists the 400 and 415 answers."""

    def __init__(self, path: str, endpoint: Callable[..., Any], **kwargs: Any) -> None:
        super().__init__(path, endpoint, **kwargs)
        if self.body_field is not None:
            self.responses = {**BODY_RESPONSES, **self.responses}
        if self._answers_json():
            self.responses = {406: {"description": "the Accept header admits no JSON answer",
                                    "content": {"application/problem+json": {}}},
                              **self.responses}

    def _answers_json(self) -> bool:
        cls = self.response_class
        return cls is not Response and not (isinstance(cls, type)
                                            and not issubclass(cls, JSONResponse))

    def get_route_handler(self) -> Callable[[Request], Coroutine[Any, Any, Response]]:
        handler = super().get_route_handler()
        answers_json = self._answers_json()

        async def negotiated(request: Request) -> Response:
            if answers_json:
                _negotiate(request)
            return await handler(request)

        if self.body_field is None:
            return negotiated

        async def checked(request: Request) -> Response:
            if answers_json:
                _negotiate(request)
            ctype = request.headers.get("content-type")
            if not is_json_media_type(ctype):
                raise unsupported_media_type(ctype or "")
            body, parsed = read_json(await request.body())
            # FastAPI reads the (cached) body and its JSON from the request: hand it the
            # bytes without the mark and the value parsed once here
            request._body = body
            if parsed is not None:
                request._json = parsed
            return await handler(request)

        return checked
