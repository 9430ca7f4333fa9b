"""Stored models: create, read, list with cursors, forecast without refit, fan chart, delete."""

from __future__ import annotations

import numpy as np
import pytest
from fastapi.testclient import TestClient

from priors import FanfoldVAR
from service.app import create_app
from service.config import Settings
from service.serialization import CorruptBlobError, posterior_from_blob, posterior_to_blob


@pytest.fixture
def model_body(demo_body):
    body = {k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")}
    return {**body, "name": "tyres, tubes, pads", "lags": 2}


def _create(client, body):
    r = client.post("/v1/models", json=body)
    assert r.status_code == 201, r.text
    return r


def test_create_read_and_forecast_without_refit(client, model_body, demo_body):
    r = _create(client, model_body)
    model = r.json()
    assert r.headers["location"] == f"/v1/models/{model['id']}"
    assert model["lags"] == 2 and model["series"] == ["tyres", "inner_tubes", "brake_pads"]
    assert model["span"] == {"start": "2016-03-01", "end": "2019-12-01", "observations": 46}
    assert {c["regressor"] for c in model["coefficients"]} >= {"const", "tyres[t-1]"}
    assert client.get(f"/v1/models/{model['id']}").json() == model
    # forecasting the stored model equals the one-shot forecast of the same data
    stored = client.post(f"/v1/models/{model['id']}/forecasts",
                         json={"horizon": 4, "draws": 300, "seed": 11})
    oneshot = client.post("/v1/forecasts", json=demo_body)
    assert stored.status_code == 200 and stored.json() == oneshot.json()


def test_stored_posterior_round_trips_exactly_and_is_checked(demo):
    model = FanfoldVAR(lags=2).fit(demo)
    blob, meta = posterior_to_blob(model.posterior_)
    back = posterior_from_blob(blob, meta)
    for name in ("B", "R", "S"):
        assert np.array_equal(getattr(back, name), getattr(model.posterior_, name))
    assert back.df == model.posterior_.df and back.log_ml == model.posterior_.log_ml
    assert b"pickle" not in blob and meta["format"] == "fanfold-niw-1"
    with pytest.raises(CorruptBlobError, match="checksum"):
        posterior_from_blob(blob, {**meta, "sha256": "0" * 64})


def test_models_survive_a_restart_on_the_same_database(tmp_path, model_body):
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'models.db'}")
    with TestClient(create_app(settings)) as c:
        model_id = _create(c, model_body).json()["id"]
        before = c.post(f"/v1/models/{model_id}/forecasts", json={"horizon": 3, "seed": 4})
    with TestClient(create_app(settings)) as c:
        after = c.post(f"/v1/models/{model_id}/forecasts", json={"horizon": 3, "seed": 4})
    assert after.status_code == 200 and after.content == before.content


def test_list_is_paginated_with_an_opaque_cursor(client, model_body):
    ids = [_create(client, {**model_body, "name": f"m{i}"}).json()["id"] for i in range(5)]
    seen, cursor, pages = [], None, 0
    while True:
        params = {"limit": 2, **({"cursor": cursor} if cursor else {})}
        r = client.get("/v1/models", params=params)
        assert r.status_code == 200
        page = r.json()
        seen += [m["id"] for m in page["data"]]
        pages += 1
        cursor = page["next"]
        if cursor is None:
            assert "link" not in r.headers
            break
        assert 'rel="next"' in r.headers["link"]
    assert seen == ids and pages == 3
    assert client.get("/v1/models", params={"cursor": "not-a-cursor"}).status_code == 400
    assert client.get("/v1/models", params={"limit": 101}).status_code == 422


def test_fan_chart_bands_nested_and_etag_gives_304(client, model_body):
    model_id = _create(client, model_body).json()["id"]
    url = f"/v1/models/{model_id}/fan-chart"
    r = client.get(url, params={"horizon": 6, "bands": "50,80,95", "draws": 500})
    assert r.status_code == 200
    assert r.headers["cache-control"] == "private, no-cache"
    chart = r.json()
    assert len(chart["history"]["dates"]) == 24 and len(chart["dates"]) == 6
    b50, b95 = chart["bands"]["50"]["tyres"], chart["bands"]["95"]["tyres"]
    assert all(lo95 <= lo50 <= med <= hi50 <= hi95 for lo95, lo50, med, hi50, hi95 in zip(
        b95["lower"], b50["lower"], chart["median"]["tyres"], b50["upper"], b95["upper"],
        strict=True))
    etag = r.headers["etag"]
    again = client.get(url, params={"horizon": 6, "bands": "50,80,95", "draws": 500},
                       headers={"If-None-Match": etag})
    assert again.status_code == 304 and again.headers["etag"] == etag and not again.content
    other = client.get(url, params={"horizon": 7, "bands": "50,80,95", "draws": 500},
                       headers={"If-None-Match": etag})
    assert other.status_code == 200 and other.headers["etag"] != etag
    assert client.get(url, params={"bands": "0,120"}).status_code == 422


def test_unknown_deleted_and_malformed_ids(client, model_body):
    model_id = _create(client, model_body).json()["id"]
    assert client.delete(f"/v1/models/{model_id}").status_code == 204
    for method, suffix in (("get", ""), ("delete", ""), ("get", "/fan-chart")):
        r = getattr(client, method)(f"/v1/models/{model_id}{suffix}")
        assert r.status_code == 404 and r.headers["content-type"] == "application/problem+json"
    assert client.post(f"/v1/models/{model_id}/forecasts", json={}).status_code == 404
    assert client.get("/v1/models/not-a-uuid").status_code == 422


def test_bad_model_input_is_a_422_problem(client, model_body):
    body = {**model_body, "series": {"tyres": [5.0] * 48}}
    r = client.post("/v1/models", json=body)
    assert r.status_code == 422 and "no variation" in r.json()["detail"]
    assert client.post("/v1/models", json={**model_body, "horizon": 3}).status_code == 422
    assert client.get("/v1/models").json()["data"] == []  # nothing stored
