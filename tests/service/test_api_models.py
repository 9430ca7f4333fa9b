"""Stored models: create, read, list with cursors, forecast without refit, fan chart, delete."""

from __future__ import annotations

import numpy as np
import pytest
from fastapi.testclient import TestClient
from sqlalchemy import event

from priors import FanfoldVAR
from service.app import create_app
from service.config import Settings
from service.serialization import CorruptBlobError, posterior_from_blob, posterior_to_blob

pytestmark = pytest.mark.both_databases


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


def test_models_survive_a_restart_on_the_same_database(database_url, model_body):
    settings = Settings(database_url=database_url)
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
    # a poll reads the model's version only, not its data, posterior and draws
    statements: list[str] = []

    def record(conn, cursor, sql, *rest) -> None:
        statements.append(sql)

    engine = client.app.state.engine
    event.listen(engine, "before_cursor_execute", record)
    try:
        polled = client.get(url, params={"horizon": 6, "bands": "50,80,95", "draws": 500},
                            headers={"If-None-Match": etag})
    finally:
        event.remove(engine, "before_cursor_execute", record)
    assert polled.status_code == 304 and polled.headers["etag"] == etag
    selects = [sql for sql in statements if sql.lstrip().upper().startswith("SELECT")
               and "select 1" not in sql.lower()]
    assert len(selects) == 1 and "posterior" not in selects[0] and "version" in selects[0]
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
    # PostgreSQL text cannot store U+0000: refused alike on both databases, not a 500
    for headers in ({}, {"Prefer": "respond-async"}):
        r = client.post("/v1/models", json={**model_body, "name": "tyres\u0000"},
                        headers=headers)
        assert r.status_code == 422 and r.json()["errors"][0]["field"] == "name"
    long_name = "\N{BICYCLE}" * 200  # 200 characters (800 bytes) fit VARCHAR(200)
    r = client.post("/v1/models", json={**model_body, "name": long_name})
    assert r.status_code == 201 and client.get(r.headers["location"]).json()["name"] == long_name
    assert client.delete(r.headers["location"]).status_code == 204
    assert client.get("/v1/models").json()["data"] == []  # nothing stored


def test_observations_update_the_model_like_a_refit_and_change_the_etag(client, demo):
    part = demo[["tyres", "chains"]]

    def body(rows):
        return {"series": {c: rows[c].astype(float).tolist() for c in rows},
                "start": rows.index[0].date().isoformat(), "frequency": "MS"}

    model = _create(client, {**body(part.iloc[:100]), "lags": 2})
    model_id, version = model.json()["id"], model.json()["version"]
    chart = client.get(f"/v1/models/{model_id}/fan-chart")
    r = client.post(f"/v1/models/{model_id}/observations", json=body(part.iloc[100:]))
    assert r.status_code == 200, r.text
    updated = r.json()
    assert updated["version"] == version + 1
    assert updated["span"]["end"] == "2025-12-01"
    assert updated["hyperparameters"] == model.json()["hyperparameters"]  # no retuning
    again = client.get(f"/v1/models/{model_id}/fan-chart",
                       headers={"If-None-Match": chart.headers["etag"]})
    assert again.status_code == 200 and again.headers["etag"] != chart.headers["etag"]
    assert again.json()["dates"][0] == "2026-01-01"
    # the same update in the engine equals a refit under the same prior (tested in
    # tests/priors/test_model.py); here: the stored answer equals the engine's
    fitted = FanfoldVAR(lags=2).fit(part.iloc[:100])
    grown = fitted.append(part.iloc[100:])
    np.testing.assert_allclose(
        [c["mean"] for c in updated["coefficients"]],
        grown.coefficients()["mean"].to_numpy(), rtol=1e-9, atol=1e-9)


def test_observations_must_continue_the_data(client, demo):
    part = demo[["tyres", "chains"]]
    first = {"series": {c: part[c].iloc[:100].astype(float).tolist() for c in part},
             "start": "2016-01-01", "frequency": "MS", "lags": 1}
    model_id = _create(client, first).json()["id"]
    gap = {"series": {c: part[c].iloc[101:].astype(float).tolist() for c in part},
           "start": part.index[101].date().isoformat(), "frequency": "MS"}
    r = client.post(f"/v1/models/{model_id}/observations", json=gap)
    assert r.status_code == 422 and r.json()["type"].endswith("TimeIndexError")
    one = {"series": {"tyres": [1000.0, 1010.0, 990.0]}, "start": "2024-05-01",
           "frequency": "MS"}
    r = client.post(f"/v1/models/{model_id}/observations", json=one)
    assert r.status_code == 422 and "every series" in r.json()["detail"]
    assert client.get(f"/v1/models/{model_id}").json()["version"] == 1  # unchanged


def test_one_period_without_dates_continues_the_models_calendar(client, demo):
    """An inventory system posts each month as it closes: one value per series, no
    dates. The model's calendar goes on (it was wiped to "1", "2", ... before), a
    seasonal model stays seasonal, and the result equals appending with dates."""
    part = demo[["tyres", "chains"]]
    first = {"series": {c: part[c].iloc[:100].astype(float).tolist() for c in part},
             "start": "2016-01-01", "frequency": "MS", "lags": 2, "seasonal": True}
    model_id = _create(client, first).json()["id"]
    for month in range(100, 103):  # three closes, one period each
        row = {"series": {c: [float(part[c].iloc[month])] for c in part}}
        r = client.post(f"/v1/models/{model_id}/observations", json=row)
        assert r.status_code == 200, r.text
        assert r.json()["span"]["end"] == part.index[month].date().isoformat()
    stored = client.get(f"/v1/models/{model_id}").json()
    assert stored["version"] == 4 and stored["span"]["start"].startswith("2016-")
    chart = client.get(f"/v1/models/{model_id}/fan-chart", params={"history": 2}).json()
    assert chart["history"]["dates"] == ["2024-06-01", "2024-07-01"]
    assert chart["dates"][0] == "2024-08-01"
    # the same three periods in one post, with their dates: the same model
    other = _create(client, first).json()["id"]
    dated = {"series": {c: part[c].iloc[100:103].astype(float).tolist() for c in part},
             "start": part.index[100].date().isoformat(), "frequency": "MS"}
    assert client.post(f"/v1/models/{other}/observations", json=dated).status_code == 200
    a = client.get(f"/v1/models/{model_id}").json()["coefficients"]
    b = client.get(f"/v1/models/{other}").json()["coefficients"]
    np.testing.assert_allclose([c["mean"] for c in a], [c["mean"] for c in b], rtol=1e-10)


def test_a_model_without_dates_takes_new_periods_without_dates(client, demo):
    part = demo[["tyres", "chains"]]
    plain = {"series": {c: part[c].iloc[:60].astype(float).tolist() for c in part},
             "lags": 1}
    model_id = _create(client, plain).json()["id"]
    row = {"series": {c: [float(part[c].iloc[60])] for c in part}}
    assert client.post(f"/v1/models/{model_id}/observations", json=row).status_code == 200
    dated = {**row, "start": "2021-01-01", "frequency": "MS"}
    r = client.post(f"/v1/models/{model_id}/observations", json=dated)
    assert r.status_code == 422 and "no dates" in r.json()["detail"]


def test_concurrent_updates_cannot_both_win(database_url, demo):
    # optimistic concurrency on the model row: a writer holding an old version loses
    from sqlalchemy.orm.exc import StaleDataError

    from service.db import make_engine, make_session_factory
    from service.migrate import upgrade
    from service.store import get_model, replace_fitted, save_model

    engine = make_engine(database_url)
    upgrade(engine)
    sessions = make_session_factory(engine)
    part = demo[["tyres", "chains"]]
    model = FanfoldVAR(lags=1).fit(part.iloc[:100])
    with sessions() as s:
        model_id = save_model(session=s, tenant="t", name=None, params=model.resolved_params(),
                              frame=part.iloc[:100], model=model).id
    grown = model.append(part.iloc[100:])
    with sessions() as a, sessions() as b:
        row_a = get_model(session=a, tenant="t", model_id=model_id)
        row_b = get_model(session=b, tenant="t", model_id=model_id)
        replace_fitted(session=a, row=row_a, frame=part, model=grown)
        with pytest.raises(StaleDataError):
            replace_fitted(session=b, row=row_b, frame=part, model=grown)
    with sessions() as s:
        assert get_model(session=s, tenant="t", model_id=model_id).version == 2
    engine.dispose()


def test_idempotency_key_replays_the_original_answer(client, model_body):
    headers = {"Idempotency-Key": "order-run-2026-01"}
    first = client.post("/v1/models", json=model_body, headers=headers)
    again = client.post("/v1/models", json=model_body, headers=headers)
    assert first.status_code == again.status_code == 201
    assert again.json() == first.json() and again.headers["location"] == first.headers["location"]
    assert again.headers["idempotent-replayed"] == "true"
    assert len(client.get("/v1/models").json()["data"]) == 1  # nothing new stored
    other = client.post("/v1/models", json={**model_body, "lags": 1}, headers=headers)
    assert other.status_code == 422 and "different request" in other.json()["detail"]
    fresh = client.post("/v1/models", json=model_body, headers={"Idempotency-Key": "another"})
    assert fresh.status_code == 201 and fresh.json()["id"] != first.json()["id"]


def test_idempotent_retry_after_delete_replays_and_creates_nothing(client, model_body):
    # The key records what the POST did (IETF idempotency-key draft): a retry after the
    # model was deleted gets the original 201 again, creates nothing, and its Location
    # answers 404.
    headers = {"Idempotency-Key": "order-run-2026-02"}
    first = client.post("/v1/models", json=model_body, headers=headers)
    assert client.delete(first.headers["location"]).status_code == 204
    again = client.post("/v1/models", json=model_body, headers=headers)
    assert again.status_code == 201 and again.json() == first.json()
    assert again.headers["idempotent-replayed"] == "true"
    assert client.get(again.headers["location"]).status_code == 404
    assert client.get("/v1/models").json()["data"] == []
