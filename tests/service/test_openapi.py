"""The OpenAPI document is the contract and the route inventory (OWASP API9).

Its shape must equal the committed snapshot: every path and method with its request
media types and response codes, and every schema's properties, required fields and
bounds. (The shape, not the text: FastAPI and pydantic versions differ in wording.)
After a deliberate API change, regenerate it with
``FANFOLD_UPDATE_OPENAPI=1 python -m pytest tests/service/test_openapi.py``."""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

SNAPSHOT = Path(__file__).with_name("openapi-shape.json")
_BOUNDS = ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum", "minLength",
           "maxLength", "minItems", "maxItems", "enum", "const", "pattern")


def _bounds(node: Any) -> Any:
    """The bounds found anywhere in a schema node, in a stable order."""
    found: dict[str, Any] = {}
    if isinstance(node, dict):
        for key in _BOUNDS:
            if key in node:
                found[key] = node[key]
        for key in ("anyOf", "allOf", "oneOf"):
            for i, sub in enumerate(node.get(key, [])):
                inner = _bounds(sub)
                if inner:
                    found[f"{key}[{i}]"] = inner
        if "items" in node and _bounds(node["items"]):
            found["items"] = _bounds(node["items"])
    return found


def shape(document: dict[str, Any]) -> dict[str, Any]:
    paths = {}
    for path, methods in document["paths"].items():
        for method, op in methods.items():
            body = op.get("requestBody", {}).get("content", {})
            params = sorted(p["name"] for p in op.get("parameters", []))
            paths[f"{method.upper()} {path}"] = {
                "request": sorted(body), "parameters": params,
                "responses": sorted(op.get("responses", {}))}
    schemas = {}
    for name, schema in document.get("components", {}).get("schemas", {}).items():
        props = schema.get("properties", {})
        schemas[name] = {"required": sorted(schema.get("required", [])),
                         "properties": {k: _bounds(v) for k, v in sorted(props.items())}}
    return {"paths": paths, "schemas": schemas}


def test_openapi_shape_matches_the_committed_snapshot(client):
    text = json.dumps(shape(client.get("/openapi.json").json()), indent=1,
                      sort_keys=True) + "\n"
    if os.environ.get("FANFOLD_UPDATE_OPENAPI") == "1":
        SNAPSHOT.write_text(text)
    assert SNAPSHOT.exists(), "no snapshot yet: run with FANFOLD_UPDATE_OPENAPI=1"
    assert text == SNAPSHOT.read_text(), "the API changed: review and update the snapshot"


def test_only_documented_routes_exist(client):
    paths = set(client.get("/openapi.json").json()["paths"])
    assert paths == {"/livez", "/readyz", "/metrics", "/v1/forecasts", "/v1/models",
                     "/v1/models/{model_id}", "/v1/models/{model_id}/forecasts",
                     "/v1/models/{model_id}/fan-chart", "/v1/models/{model_id}/observations",
                     "/v1/models/{model_id}/fan-chart.svg",
                     "/v1/models/{model_id}/fan-chart.png",
                     "/v1/jobs/{job_id}", "/v1/backtests", "/v1/backtests/{job_id}",
                     "/v1/batches", "/v1/batches/{job_id}/results",
                     "/v1/models/{model_id}/scenarios",
                     "/v1/models/{model_id}/impulse-responses",
                     "/v1/models/{model_id}/variance-decomposition",
                     "/v1/models/{model_id}/replenishment"}


def test_the_docs_page_loads_nothing_from_the_internet(client):
    """/docs took its scripts from a public address and was blank offline; the assets
    are vendored (service/static/docs) and served by the server itself."""
    import re

    page = client.get("/docs")
    assert page.status_code == 200
    urls = re.findall(r'(?:src|href|url)\s*[=:]\s*["\']([^"\']+)["\']', page.text)
    assert urls and not [u for u in urls if "://" in u or u.startswith("//")], urls
    assets = [u for u in urls if u.startswith("/docs/assets/")]
    assert len(assets) == 3
    for url in assets:
        served = client.get(url)
        assert served.status_code == 200 and len(served.content) > 500, url
    assert client.get("/docs/assets/../../config.py").status_code == 404
    assert client.get("/docs/assets/swagger-ui.js.map").status_code == 404
