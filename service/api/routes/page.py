"""The planner's web page: ``/`` and its files under ``/app/`` (``service/static/app``).

Static files only, read from the installed package, no build step and nothing fetched
from elsewhere at run time. The page holds no data of its own: it calls the ``/v1`` API
from the browser with the user's API key (when keys are configured), so these routes
are open like the probes. Their answers carry a strict Content-Security-Policy (scripts
and styles from this server only, no inline code, requests to this server only, no
framing); the API's own answers are not changed.
"""

from __future__ import annotations

import functools
import hashlib
from importlib.resources import files

from fastapi import APIRouter, Request, Response
from starlette.exceptions import HTTPException

router = APIRouter(include_in_schema=False)

CSP = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data: blob:; "
       "connect-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
SECURITY_HEADERS = {
    "Content-Security-Policy": CSP,
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "X-Frame-Options": "DENY",
}
_MEDIA = {".html": "text/html; charset=utf-8", ".css": "text/css; charset=utf-8",
          ".js": "text/javascript; charset=utf-8", ".svg": "image/svg+xml",
          ".csv": "text/csv; charset=utf-8", ".md": "text/markdown; charset=utf-8"}


@functools.cache
def _assets() -> dict[str, tuple[bytes, str]]:
    """Every servable file of the page: relative path -> (bytes, media type)."""
    root = files("service.static") / "app"
    found: dict[str, tuple[bytes, str]] = {}

    def walk(folder: object, prefix: str) -> None:
        for entry in folder.iterdir():  # type: ignore[attr-defined]
            name = prefix + entry.name
            if entry.is_dir():
                walk(entry, name + "/")
            elif (suffix := "." + entry.name.rsplit(".", 1)[-1]) in _MEDIA:
                found[name] = (entry.read_bytes(), _MEDIA[suffix])

    walk(root, "")
    found["demo.csv"] = ((files("service.demo") / "bike_parts_demand.csv").read_bytes(),
                         _MEDIA[".csv"])
    return found


def _answer(request: Request, name: str) -> Response:
    assets = _assets()
    if name not in assets:
        raise HTTPException(404, f"no page file {name!r}")
    body, media = assets[name]
    etag = '"' + hashlib.sha256(body).hexdigest()[:32] + '"'
    headers = {**SECURITY_HEADERS, "ETag": etag, "Cache-Control": "no-cache"}
    if request.headers.get("if-none-match", "") == etag:
        return Response(status_code=304, headers=headers)
    return Response(body, media_type=media, headers=headers)


@router.get("/")
def planner_page(request: Request) -> Response:
    """The planner's page."""
    return _answer(request, "index.html")


@router.get("/app/{name:path}")
def planner_file(name: str, request: Request) -> Response:
    """A file of the page (scripts, styles, the vendored chart library, the demo data)."""
    return _answer(request, name)
