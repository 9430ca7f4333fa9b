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
