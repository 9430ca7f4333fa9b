"""Probes, metrics and request ids."""

from __future__ import annotations


def test_probes(client):
    assert client.get("/livez").json() == {"status": "ok"}
    r = client.get("/readyz")
    assert r.status_code == 200 and r.json() == {"status": "ready"}


def test_request_id_is_echoed_or_minted(client):
    r = client.get("/livez", headers={"X-Request-ID": "planner-42"})
    assert r.headers["x-request-id"] == "planner-42"
    minted = client.get("/livez", headers={"X-Request-ID": "bad id with spaces"})
    assert minted.headers["x-request-id"] != "bad id with spaces"
    assert len(minted.headers["x-request-id"]) == 36


def test_metrics_count_requests_by_route_template(client, demo_body):
    client.post("/v1/forecasts", json=demo_body)
    client.post("/v1/forecasts", json={**demo_body, "horizon": 0})
    text = client.get("/metrics").text
    assert 'fanfold_http_requests_total{method="POST",route="/v1/forecasts",status="200"} 1.0' \
        in text
    assert 'route="/v1/forecasts",status="422"} 1.0' in text
    assert "fanfold_forecast_duration_seconds_count 1.0" in text


def test_readyz_fails_when_the_database_is_gone_or_behind(settings, tmp_path):
    from fastapi.testclient import TestClient
    from sqlalchemy import text

    from service.app import create_app
    from service.config import Settings

    app = create_app(Settings(database_url=f"sqlite:///{tmp_path / 'r.db'}"))
    with TestClient(app) as c:
        assert c.get("/readyz").status_code == 200
        with app.state.engine.begin() as conn:  # pretend a migration is missing
            conn.execute(text("UPDATE alembic_version SET version_num = '0001'"))
        r = c.get("/readyz")
        assert r.status_code == 503 and "newest revision" in r.json()["detail"]
        # the database becomes unreachable (here: the path is now a folder)
        from service.db import make_engine

        (tmp_path / "gone").mkdir()
        app.state.engine = make_engine(f"sqlite:///{tmp_path / 'gone'}")
        r = c.get("/readyz")
        assert r.status_code == 503 and "not reachable" in r.json()["detail"]
        assert r.headers["retry-after"] == "5"
        assert c.get("/livez").status_code == 200  # liveness does not touch the database


def test_json_log_lines_carry_request_id_and_route(client, demo_body, caplog):
    import json as _json
    import logging

    from service.logs import JsonFormatter

    caplog.set_level(logging.INFO, logger="fanfold.access")
    client.post("/v1/forecasts", json={**demo_body, "horizon": 0},
                headers={"X-Request-ID": "trace-7", "X-API-Key": "secret-key-value"})
    records = [r for r in caplog.records if r.name == "fanfold.access"]
    line = _json.loads(JsonFormatter().format(records[-1]))
    assert line["request_id"] == "trace-7" and line["route"] == "/v1/forecasts"
    assert line["status"] == 422 and line["event"] == "request" and line["duration_s"] >= 0
    assert "secret-key-value" not in caplog.text


def test_405_lists_every_method_of_the_path(client):
    # RFC 9110 sec. 15.5.6: a 405 carries Allow with all methods the resource supports
    model = "/v1/models/00000000-0000-4000-8000-000000000000"
    r = client.patch(model)
    assert r.status_code == 405 and r.headers["allow"] == "DELETE, GET"
    assert r.headers["content-type"].startswith("application/problem+json")
    assert client.put("/v1/models").headers["allow"] == "GET, POST"
    assert client.delete("/v1/forecasts").headers["allow"] == "POST"
