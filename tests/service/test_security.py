"""Security checks across the whole API (OWASP API1, API2, API8; RFC 9457 bodies).

- tenant isolation matrix: every operation on a stored model, job or backtest, called
  with another tenant's key, answers 404 exactly as for an unknown id (the list of
  operations comes from the OpenAPI document, so a new route cannot be missed);
- API keys never appear in a response or a log line;
- a 500 carries no traceback and none of the exception's text;
- CORS: only configured origins get an Access-Control-Allow-Origin;
- nothing deserialises with pickle (a static scan of priors/ and service/).
"""

from __future__ import annotations

import ast
import logging
import time
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.auth import new_key
from service.config import Settings

KEY_A, ENTRY_A = new_key("planner", "acme")
KEY_B, ENTRY_B = new_key("other", "globex")
A, B = {"X-API-Key": KEY_A}, {"X-API-Key": KEY_B}
ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def secured(tmp_path):
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'sec.db'}",
                        api_keys=[ENTRY_A, ENTRY_B])
    with TestClient(create_app(settings)) as c:
        yield c


def _series(demo) -> dict:
    part = demo.iloc[:60][["tyres", "inner_tubes"]]
    return {"series": {c: part[c].astype(float).tolist() for c in part},
            "start": "2016-01-01", "frequency": "MS", "lags": 1}


def _wait(client, location: str, timeout: float = 60.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if client.get(location, headers=A).json()["status"] in ("succeeded", "failed"):
            return
        time.sleep(0.05)
    raise AssertionError(f"job {location} not finished within {timeout} s")


BODIES = {  # a valid body per operation with one
    "/v1/models/{model_id}/forecasts": {"horizon": 2, "draws": 50},
    "/v1/models/{model_id}/observations": {"series": {"tyres": [1200.0],
                                                      "inner_tubes": [2000.0]}},
    "/v1/models/{model_id}/scenarios": {"horizon": 2, "draws": 50, "conditions": [
        {"series": "tyres", "step": 1, "value": 1300}]},
    "/v1/models/{model_id}/replenishment": {"lead_time": 2, "draws": 100, "items": [
        {"series": "tyres", "on_hand": 100, "service_level": 0.9}]},
}


def test_another_tenants_objects_are_404_on_every_route(secured, demo):
    model_id = secured.post("/v1/models", json=_series(demo), headers=A).json()["id"]
    job = secured.post("/v1/models", json=_series(demo),
                       headers={**A, "Prefer": "respond-async"}).json()
    backtest = secured.post("/v1/backtests", json={**_series(demo), "origins": 1,
                                                   "horizon": 1, "draws": 20}, headers=A)
    assert backtest.status_code == 202
    _wait(secured, backtest.headers["location"])  # finished, so its scores are readable
    ids = {"model_id": model_id, "job_id": job["id"]}
    backtest_id = backtest.json()["id"]
    paths = secured.get("/openapi.json", headers=A).json()["paths"]
    tried = []
    for path, operations in paths.items():
        if "{" not in path:
            continue
        for method in operations:
            url = path.replace("{model_id}", ids["model_id"]).replace(
                "{job_id}", backtest_id if path.startswith("/v1/backtests") else ids["job_id"])
            body = BODIES.get(path)
            answer = secured.request(method.upper(), url, headers=B,
                                     **({"json": body} if body is not None else {}))
            assert answer.status_code == 404, (method, path, answer.status_code, answer.text)
            assert answer.headers["content-type"] == "application/problem+json"
            # exactly the answer for an id that does not exist
            unknown = url.replace(ids["model_id"], "00000000-0000-4000-8000-000000000000")
            unknown = unknown.replace(ids["job_id"], "00000000-0000-4000-8000-000000000000")
            unknown = unknown.replace(backtest_id, "00000000-0000-4000-8000-000000000000")
            other = secured.request(method.upper(), unknown, headers=A,
                                    **({"json": body} if body is not None else {}))
            assert other.status_code == 404
            tried.append(f"{method.upper()} {path}")
    assert len(tried) >= 12, tried  # every model, job and backtest operation
    # and the owner still has everything, unchanged
    assert secured.get(f"/v1/models/{model_id}", headers=A).json()["version"] == 1
    assert secured.get("/v1/models", headers=B).json()["data"] == []


def test_keys_never_appear_in_answers_or_logs(secured, demo, caplog):
    caplog.set_level(logging.DEBUG)
    answers = [secured.post("/v1/models", json=_series(demo), headers=A),
               secured.post("/v1/forecasts", json={**_series(demo), "horizon": 0}, headers=A),
               secured.get("/v1/models", headers={"X-API-Key": KEY_A[:-1] + "x"}),
               secured.get("/v1/models", headers=A)]
    secret = KEY_A.split(".", 1)[1]
    for answer in answers:
        assert secret not in answer.text and KEY_A not in answer.text
    logged = "\n".join(f"{r.getMessage()} {r.__dict__}" for r in caplog.records)
    assert logged  # the requests were logged
    assert secret not in logged and KEY_A[:-1] not in logged


def test_a_500_carries_no_traceback_and_no_exception_text(tmp_path, monkeypatch, demo):
    import service.api.routes.models as routes

    def broken(*args, **kwargs):
        raise RuntimeError("internal detail /srv/secret.db password=hunter2")

    monkeypatch.setattr(routes, "fit_model", broken)
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'x.db'}")
    with TestClient(create_app(settings), raise_server_exceptions=False) as c:
        answer = c.post("/v1/models", json=_series(demo))
    assert answer.status_code == 500
    assert answer.headers["content-type"] == "application/problem+json"
    body = answer.json()
    assert set(body) >= {"type", "title", "status", "detail", "request_id"}
    for leak in ("Traceback", "RuntimeError", "hunter2", "secret.db", "File \""):
        assert leak not in answer.text


def test_cors_answers_only_the_configured_origins(tmp_path):
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'c.db'}",
                        cors_origins=["https://dash.example"])
    with TestClient(create_app(settings)) as c:
        preflight = {"Access-Control-Request-Method": "POST",
                     "Access-Control-Request-Headers": "content-type,x-api-key"}
        ok = c.options("/v1/forecasts", headers={"Origin": "https://dash.example", **preflight})
        assert ok.headers.get("access-control-allow-origin") == "https://dash.example"
        other = c.options("/v1/forecasts", headers={"Origin": "https://evil.example",
                                                     **preflight})
        assert "access-control-allow-origin" not in other.headers
        plain = c.get("/livez", headers={"Origin": "https://evil.example"})
        assert "access-control-allow-origin" not in plain.headers
    with TestClient(create_app(Settings(database_url=f"sqlite:///{tmp_path / 'd.db'}"))) as c:
        none = c.get("/livez", headers={"Origin": "https://dash.example"})
        assert "access-control-allow-origin" not in none.headers  # no origins configured


#: ways to turn bytes into Python objects that can run code
UNSAFE = {("pickle", "load"), ("pickle", "loads"), ("pickle", "Unpickler"),
          ("dill", "load"), ("dill", "loads"), ("joblib", "load"), ("marshal", "loads"),
          ("pd", "read_pickle"), ("yaml", "load"), ("yaml", "unsafe_load")}


def _unsafe_calls(source: str) -> list[str]:
    found = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import | ast.ImportFrom):
            names = [a.name for a in node.names] + [getattr(node, "module", None) or ""]
            found += [f"line {node.lineno} import {n}" for n in names
                      if n.split(".")[0] in ("pickle", "dill", "marshal", "shelve")]
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute):
            owner = getattr(node.func.value, "id", None)
            if (owner, node.func.attr) in UNSAFE:
                found.append(f"line {node.lineno} {owner}.{node.func.attr}")
            if node.func.attr == "load" and owner == "np" and any(
                    k.arg == "allow_pickle" and getattr(k.value, "value", False) is True
                    for k in node.keywords):
                found.append(f"line {node.lineno} np.load(allow_pickle=True)")
    return found


def test_the_pickle_scan_finds_what_it_should():
    assert _unsafe_calls("import pickle\npickle.loads(b'')\n") == [
        "line 1 import pickle", "line 2 pickle.loads"]
    assert _unsafe_calls("import numpy as np\nnp.load('x', allow_pickle=True)\n") == [
        "line 2 np.load(allow_pickle=True)"]


@pytest.mark.parametrize("path", sorted((ROOT / "priors").rglob("*.py"))
                         + sorted((ROOT / "service").rglob("*.py")),
                         ids=lambda p: str(p.relative_to(ROOT)))
def test_nothing_deserialises_with_pickle(path):
    assert _unsafe_calls(path.read_text()) == []
