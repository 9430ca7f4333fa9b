"""The OpenAPI document is the contract and the route inventory (OWASP API9): it must
equal the committed snapshot. After a deliberate API change, regenerate it with
``FANFOLD_UPDATE_OPENAPI=1 python -m pytest tests/service/test_openapi.py``."""

from __future__ import annotations

import json
import os
from pathlib import Path

SNAPSHOT = Path(__file__).with_name("openapi.json")


def test_openapi_matches_the_committed_snapshot(client):
    document = client.get("/openapi.json").json()
    text = json.dumps(document, indent=1, sort_keys=True) + "\n"
    if os.environ.get("FANFOLD_UPDATE_OPENAPI") == "1":
        SNAPSHOT.write_text(text)
    assert SNAPSHOT.exists(), "no snapshot yet: run with FANFOLD_UPDATE_OPENAPI=1"
    assert text == SNAPSHOT.read_text(), "the API changed: review and update the snapshot"


def test_only_documented_routes_exist(client):
    paths = set(client.get("/openapi.json").json()["paths"])
    assert paths == {"/livez", "/readyz", "/metrics", "/v1/forecasts", "/v1/models",
                     "/v1/models/{model_id}", "/v1/models/{model_id}/forecasts",
                     "/v1/models/{model_id}/fan-chart", "/v1/models/{model_id}/observations",
                     "/v1/jobs/{job_id}"}
