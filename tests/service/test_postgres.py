"""The same service on PostgreSQL (FANFOLD_DATABASE_URL=postgresql+psycopg://...).

A temporary server is started on 127.0.0.1 by the fixture; where PostgreSQL is not
installed the tests are skipped with that reason.
"""

from __future__ import annotations

import threading
import time
import uuid

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.app import create_app
from service.config import Settings

from .postgres import temporary_postgres


@pytest.fixture(scope="module")
def server_url():
    with temporary_postgres() as url:
        if url is None:
            pytest.skip("PostgreSQL server binaries (initdb, pg_ctl) are not installed")
        yield url


@pytest.fixture
def pg_url(server_url):
    """A fresh database per test."""
    name = f"t_{uuid.uuid4().hex[:12]}"
    admin = sa.create_engine(server_url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.exec_driver_sql(f"CREATE DATABASE {name}")
    admin.dispose()
    yield server_url.rsplit("/", 1)[0] + f"/{name}"


def test_full_flow_on_postgres(pg_url, demo_body):
    body = {k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")}
    with TestClient(create_app(Settings(database_url=pg_url))) as c:
        assert c.get("/readyz").status_code == 200
        created = c.post("/v1/models", json={**body, "lags": 2},
                         headers={"Idempotency-Key": "k1"})
        assert created.status_code == 201
        replay = c.post("/v1/models", json={**body, "lags": 2},
                        headers={"Idempotency-Key": "k1"})
        assert replay.json() == created.json()
        model_url = created.headers["location"]
        fc = c.post(f"{model_url}/forecasts", json={"horizon": 3, "seed": 1})
        assert fc.status_code == 200
        chart = c.get(f"{model_url}/fan-chart")
        assert c.get(f"{model_url}/fan-chart",
                     headers={"If-None-Match": chart.headers["etag"]}).status_code == 304
        job = c.post("/v1/models", json={**body, "lags": 1},
                     headers={"Prefer": "respond-async"})
        deadline = time.monotonic() + 60
        while c.get(job.headers["location"]).json()["status"] not in ("succeeded", "failed"):
            assert time.monotonic() < deadline
            time.sleep(0.05)
        assert c.get(job.headers["location"]).json()["status"] == "succeeded"
        assert len(c.get("/v1/models").json()["data"]) == 2


def test_concurrent_claims_take_each_job_once(pg_url, demo_body):
    body = {k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")}
    app = create_app(Settings(database_url=pg_url, job_workers=0,
                              max_running_jobs_per_tenant=100))
    with TestClient(app) as c:
        for _ in range(6):
            c.post("/v1/models", json={**body, "lags": 1}, headers={"Prefer": "respond-async"})
        runner, claims, lock = app.state.jobs, [], threading.Lock()

        def grab() -> None:
            while (claim := runner._claim()) is not None:
                with lock:
                    claims.append(claim[0])

        threads = [threading.Thread(target=grab) for _ in range(4)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(60)
        assert len(claims) == 6 == len(set(claims))


def test_independent_prior_draws_and_update_job_on_postgres(pg_url, demo):
    part = demo[["tyres", "chains"]]

    def series(rows):
        return {"series": {c: rows[c].astype(float).tolist() for c in rows},
                "start": rows.index[0].date().isoformat(), "frequency": "MS"}

    gibbs = {"lags": 2, "prior": "independent", "chains": 2, "burn": 50, "keep": 100,
             "seed": 3}
    with TestClient(create_app(Settings(database_url=pg_url))) as c:
        created = c.post("/v1/models", json={**series(part.iloc[:100]), **gibbs})
        assert created.status_code == 201, created.text
        assert created.json()["diagnostics"]["thresholds"]["rhat_max"] == 1.01
        model_url = created.headers["location"]
        assert c.get(model_url).json() == created.json()  # draws back from bytea, exactly
        ask = {"horizon": 3, "seed": 1, "draws": 200}
        assert c.post(f"{model_url}/forecasts", json=ask).status_code == 200
        r = c.post(f"{model_url}/observations", json=series(part.iloc[100:]))
        assert r.status_code == 202
        deadline = time.monotonic() + 60
        while (job := c.get(r.headers["location"]).json())["status"] in ("queued", "running"):
            assert time.monotonic() < deadline
            time.sleep(0.05)
        assert job["status"] == "succeeded", job
        assert c.get(model_url).json()["version"] == 2
