"""The bad-input catalogue: every category of bad request gets its exact status, an RFC
9457 problem naming the field where there is one, and changes nothing.

Categories follow ../shared/api-conventions.md ("Bad inputs"): malformed JSON 400; wrong
content type 415; oversized body 413; unknown field, wrong type, NaN/Infinity/null,
ragged series, too few observations, constant series, duplicate names, each limit,
invalid quantiles -> 422; non-UUID id 422, unknown id 404; missing or wrong key 401;
an idempotency key reused with another body 422; an Accept without JSON 406.
"""

from __future__ import annotations

import json

import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.auth import new_key
from service.config import Settings

KEY, ENTRY = new_key("planner", "acme")
AUTH = {"X-API-Key": KEY}
PROBLEM = "application/problem+json"
UNKNOWN = "00000000-0000-4000-8000-000000000000"


@pytest.fixture
def api(tmp_path):
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'bad.db'}", api_keys=[ENTRY],
                        max_body_bytes=20_000, max_series=4, job_workers=0)
    with TestClient(create_app(settings)) as client:
        yield client


def _good(demo) -> dict:
    part = demo.iloc[:48][["tyres", "inner_tubes"]]
    return {"series": {c: part[c].astype(float).tolist() for c in part},
            "start": "2016-01-01", "frequency": "MS", "lags": 2}


def _with(body: dict, **changes) -> dict:
    return {**body, **changes}


def _series(body: dict, name: str, values: list) -> dict:
    return {**body, "series": {**body["series"], name: values}}


def _cases(good: dict) -> list[tuple[str, dict, int, str | None]]:
    """(label, request, status, field named in the problem or None)."""
    n = len(good["series"]["tyres"])
    text = json.dumps(good)
    return [
        ("malformed JSON", {"content": text[:-5]}, 400, None),
        ("wrong content type", {"content": text, "headers": {"content-type": "text/xml"}},
         415, None),
        ("oversized body", {"content": json.dumps(_series(good, "chains", [1.0] * 6000))},
         413, None),
        ("unknown field", {"json": _with(good, colour="red")}, 422, "colour"),
        ("wrong type", {"json": _with(good, lags="two")}, 422, "lags"),
        ("NaN in a series", {"content": text.replace(
            json.dumps(good["series"]["tyres"][3]), "NaN", 1)}, 422, "series.tyres.3"),
        ("Infinity in a series", {"content": text.replace(
            json.dumps(good["series"]["tyres"][3]), "Infinity", 1)}, 422, "series.tyres.3"),
        ("null inside the history", {"json": _series(
            good, "tyres", [*good["series"]["tyres"][:10], None,
                            *good["series"]["tyres"][11:]])}, 422, None),
        ("ragged series", {"json": _series(good, "tyres", good["series"]["tyres"][:-3])},
         422, None),
        ("too few observations", {"json": {**_with(good, lags=4), "series": {
            k: v[:6] for k, v in good["series"].items()}}}, 422, None),
        ("constant series", {"json": _series(good, "tyres", [5.0] * n)}, 422, None),
        ("duplicate names", {"content": text.replace('"inner_tubes"', '"tyres"', 1)},
         422, "tyres"),
        ("too many series", {"json": {**good, "series": {
            f"s{i}": good["series"]["tyres"] for i in range(5)}}}, 422, "series"),
        ("lags over the limit", {"json": _with(good, lags=14)}, 422, "lags"),
        ("quantile outside (0, 1)", {"path": "/v1/forecasts",
                                     "json": _with(good, quantiles=[0.0, 1.5])},
         422, "quantiles.0"),
        ("unsorted quantiles", {"path": "/v1/forecasts",
                                "json": _with(good, quantiles=[0.9, 0.1])}, 422, "quantiles"),
        ("draws over the limit", {"path": "/v1/forecasts", "json": _with(good, draws=20_000)},
         422, "draws"),
        ("horizon over the limit", {"path": "/v1/forecasts",
                                    "json": _with(good, horizon=500)}, 422, "horizon"),
        ("missing key", {"json": good, "headers": {"X-API-Key": ""}}, 401, None),
        ("wrong key", {"json": good, "headers": {"X-API-Key": KEY[:-1] + "x"}}, 401, None),
        ("Accept without JSON", {"json": good, "headers": {"accept": "text/html"}},
         406, None),
    ]


def test_every_bad_input_gets_its_status_and_changes_nothing(api, demo):
    good = _good(demo)
    for label, request, status, field in _cases(good):
        path = request.pop("path", "/v1/models")
        headers = {**AUTH, "content-type": "application/json", **request.pop("headers", {})}
        if headers.get("X-API-Key") == "":
            headers.pop("X-API-Key")
        answer = api.post(path, headers=headers, **request)
        assert answer.status_code == status, (label, answer.status_code, answer.text[:300])
        assert answer.headers["content-type"] == PROBLEM, label
        body = answer.json()
        assert body["status"] == status and body["detail"], label
        if field is not None:
            assert field in {e["field"] for e in body.get("errors", [])}, (label, body)
    assert api.get("/v1/models", headers=AUTH).json()["data"] == []  # nothing stored


def test_ids_and_idempotency_keys(api, demo):
    good = _good(demo)
    assert api.get("/v1/models/not-a-uuid", headers=AUTH).status_code == 422
    assert api.get(f"/v1/models/{UNKNOWN}", headers=AUTH).status_code == 404
    assert api.get(f"/v1/jobs/{UNKNOWN}", headers=AUTH).status_code == 404
    assert api.get(f"/v1/backtests/{UNKNOWN}", headers=AUTH).status_code == 404
    once = {**AUTH, "Idempotency-Key": "order-2026-12"}
    first = api.post("/v1/models", json=good, headers=once)
    assert first.status_code == 201
    other = api.post("/v1/models", json=_with(good, lags=1), headers=once)
    assert other.status_code == 422 and other.headers["content-type"] == PROBLEM
    assert "Idempotency-Key" in other.json()["detail"]
    assert len(api.get("/v1/models", headers=AUTH).json()["data"]) == 1  # no second model
