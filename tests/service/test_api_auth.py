"""API keys and tenant isolation (OWASP API1 and API2)."""

from __future__ import annotations

import json

import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.auth import new_key
from service.cli.commands import main
from service.config import Settings

KEY_A, ENTRY_A = new_key("planner", "acme")
KEY_B, ENTRY_B = new_key("other", "globex")


@pytest.fixture
def secured(tmp_path):
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'auth.db'}",
                        api_keys=[ENTRY_A, ENTRY_B])
    with TestClient(create_app(settings)) as c:
        yield c


def _model(demo_body):
    return {k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")}


def test_probes_are_open_and_everything_else_needs_a_key(secured, demo_body):
    assert secured.get("/livez").status_code == 200
    assert secured.get("/readyz").status_code == 200
    for method, path, body in (("post", "/v1/forecasts", demo_body), ("get", "/v1/models", None),
                               ("get", "/metrics", None), ("get", "/openapi.json", None),
                               ("get", "/docs", None)):
        r = getattr(secured, method)(path, **({"json": body} if body else {}))
        assert r.status_code == 401, path
        assert r.headers["content-type"] == "application/problem+json"
        assert "X-API-Key" in r.headers["www-authenticate"]
    bad = secured.get("/v1/models", headers={"X-API-Key": KEY_A[:-1] + "x"})
    assert bad.status_code == 401 and "not valid" in bad.json()["detail"]
    unknown = secured.get("/v1/models", headers={"X-API-Key": "nobody.secret"})
    assert unknown.status_code == 401
    assert secured.get("/v1/models", headers={"X-API-Key": KEY_A}).status_code == 200


def test_a_tenant_sees_only_its_own_models(secured, demo_body):
    a, b = {"X-API-Key": KEY_A}, {"X-API-Key": KEY_B}
    model_id = secured.post("/v1/models", json=_model(demo_body), headers=a).json()["id"]
    assert secured.get(f"/v1/models/{model_id}", headers=a).status_code == 200
    # every route, another tenant's id: 404, exactly like an unknown id
    for method, suffix, body in (("get", "", None), ("delete", "", None),
                                 ("post", "/forecasts", {}), ("get", "/fan-chart", None),
                                 ("post", "/observations", _model(demo_body))):
        r = getattr(secured, method)(f"/v1/models/{model_id}{suffix}", headers=b,
                                     **({"json": body} if body is not None else {}))
        assert r.status_code == 404, (method, suffix, r.text)
    assert secured.get("/v1/models", headers=b).json()["data"] == []
    assert [m["id"] for m in secured.get("/v1/models", headers=a).json()["data"]] == [model_id]


def test_keys_are_stored_hashed_and_never_echoed(secured, demo_body):
    assert KEY_A not in json.dumps(ENTRY_A.model_dump())
    r = secured.post("/v1/forecasts", json={**demo_body, "horizon": 0},
                     headers={"X-API-Key": KEY_A})
    assert KEY_A not in r.text and KEY_A.split(".")[1] not in r.text


def test_cli_creates_keys_and_serve_allows_other_hosts_only_with_keys(monkeypatch, capsys):
    assert main(["keys", "new", "--id", "ops", "--tenant", "acme"]) == 0
    out = capsys.readouterr().out
    key = out.split("stored): ")[1].split()[0]
    entry = json.loads(out.split("FANFOLD_API_KEYS): ")[1])
    assert entry["tenant"] == "acme" and entry["sha256"] != key and key.startswith("ops.")
    assert main(["keys", "new", "--id", "bad id", "--tenant", "acme"]) == 2

    import uvicorn

    from service.config import get_settings

    calls = []
    monkeypatch.setattr(uvicorn, "run", lambda *a, **k: calls.append(k))
    monkeypatch.setenv("FANFOLD_API_KEYS", json.dumps([entry]))
    get_settings.cache_clear()
    try:
        assert main(["serve", "--host", "0.0.0.0", "--port", "8124"]) == 0
        assert calls[0]["host"] == "0.0.0.0"
    finally:
        get_settings.cache_clear()


def test_jobs_are_tenant_scoped(secured, demo_body):
    a, b = {"X-API-Key": KEY_A}, {"X-API-Key": KEY_B}
    r = secured.post("/v1/models", json=_model(demo_body),
                     headers={**a, "Prefer": "respond-async"})
    assert r.status_code == 202
    assert secured.get(r.headers["location"], headers=b).status_code == 404
    assert secured.delete(r.headers["location"], headers=b).status_code == 404
    assert secured.get(r.headers["location"], headers=a).status_code == 200
