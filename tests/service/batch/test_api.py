"""POST /v1/batches as a job on an in-process cluster (threads) given by its address."""

from __future__ import annotations

import time

import numpy as np
import pytest
from distributed import LocalCluster
from fastapi.testclient import TestClient

from service.app import create_app
from service.batch.table import Columns, split_groups
from service.batch.worker import ForecastSpec, forecast_chunk
from service.config import Settings

from ..helpers import wait_for_job
from .data import FAST, long_table, with_bad_groups


@pytest.fixture(scope="module")
def scheduler():
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                      dashboard_address="127.0.0.1:0", scheduler_port=0) as cluster:
        yield cluster.scheduler_address


@pytest.fixture
def client(scheduler, tmp_path):
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'api.db'}",
                        dask_address=scheduler, batch_chunk_size=2)
    with TestClient(create_app(settings)) as c:
        yield c


def _body(table, **extra):
    table = table.assign(date=table["date"].dt.strftime("%Y-%m-%d"))
    columns = {c: table[c].astype(object).where(table[c].notna(), None).tolist() for c in table}
    return {"table": columns, "group_by": ["warehouse", "family"],
            "horizon": 3, "draws": 40, "quantiles": [0.1, 0.5, 0.9], "seed": 9, **FAST,
            "transforms": None, **extra}


def test_a_batch_job_reports_progress_and_every_group(client):
    table = with_bad_groups(long_table(5))
    r = client.post("/v1/batches", json=_body(table))
    assert r.status_code == 202, r.text
    location = r.headers["location"]
    job = wait_for_job(client, location, timeout=90)
    assert job["status"] == "succeeded" and job["progress"] == 1.0, job
    assert job["kind"] == "batch" and job["result"] == f"/v1/batches/{job['id']}/results"
    out = client.get(job["result"]).json()
    assert (out["groups"], out["succeeded"], out["failed"], out["seed"]) == (8, 5, 3, 9)
    keys = [(g["warehouse"], g["family"]) for g in out["groups_status"]]
    assert sorted(keys) == keys and len(set(keys)) == 8
    failed = {(g["warehouse"], g["family"]): g["error_type"] for g in out["groups_status"]
              if g["status"] == "failed"}
    assert failed == {("bad", "short"): "TooFewObservationsError",
                      ("bad", "constant"): "ConstantSeriesError",
                      ("bad", "gap"): "MissingValuesError"}
    # the same numbers as the group forecast alone, from the batch seed
    group = split_groups(long_table(5), Columns(("warehouse", "family"))).groups[0]
    alone = forecast_chunk([group], ForecastSpec(FAST, 3, 40, (0.1, 0.5, 0.9), 9))[0]
    rows = [f for f in out["forecasts"] if (f["warehouse"], f["family"]) == group.key]
    np.testing.assert_array_equal([f["q0.9"] for f in rows], alone.quantiles[2].T.ravel())
    assert rows[0]["date"] == str(alone.dates[0])[:10] and rows[0]["step"] == 1
    csv = client.get(job["result"], params={"format": "csv", "table": "groups"})
    assert csv.status_code == 200 and csv.headers["content-type"].startswith("text/csv")
    assert csv.text.splitlines()[0].startswith("warehouse,family,status,error_type,error")
    assert len(csv.text.splitlines()) == 9


def test_batch_input_errors_are_immediate_and_name_the_field(client):
    table = long_table(2)
    r = client.post("/v1/batches", json=_body(table.drop(columns="value")))
    assert r.status_code == 422
    assert r.json()["errors"][0]["field"] == "table.value"
    r = client.post("/v1/batches", json=_body(table, group_by=["warehouse", "shelf"]))
    assert r.status_code == 422 and "shelf" in r.json()["detail"]
    r = client.post("/v1/batches", json=_body(table, horizon=500))
    assert r.status_code == 422
    missing = "/v1/batches/00000000-0000-4000-8000-000000000000/results"
    assert client.get(missing).status_code == 404


def test_results_of_an_unfinished_batch_are_a_409(client, tmp_path):
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'idle.db'}", job_workers=0)
    with TestClient(create_app(settings)) as idle:
        r = idle.post("/v1/batches", json=_body(long_table(1)))
        assert r.status_code == 202
        job = idle.get(r.headers["location"]).json()
        assert job["status"] == "queued"
        assert idle.get(f"/v1/batches/{job['id']}/results").status_code == 409


def test_an_idempotency_key_starts_one_batch(tmp_path):
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'idem.db'}", job_workers=0)
    body = _body(long_table(1))
    with TestClient(create_app(settings)) as idle:
        first = idle.post("/v1/batches", json=body, headers={"Idempotency-Key": "nightly-1"})
        again = idle.post("/v1/batches", json=body, headers={"Idempotency-Key": "nightly-1"})
        assert first.status_code == again.status_code == 202
        assert again.json()["id"] == first.json()["id"]
        assert again.headers["idempotent-replayed"] == "true"
        other = idle.post("/v1/batches", json={**body, "horizon": 4},
                          headers={"Idempotency-Key": "nightly-1"})
        assert other.status_code == 422


def test_a_running_batch_shows_progress_and_can_be_cancelled(client):
    # the automatic configuration (lags fixed): about 0.2 s per group, two groups per task
    body = {**_body(long_table(40)), "lags": 2, "tightness": "auto", "sum_coef": "auto",
            "initial": "auto", "seasonal": "auto", "transforms": "auto",
            "season_scale": "auto"}
    r = client.post("/v1/batches", json=body)
    location = r.headers["location"]
    deadline = time.monotonic() + 60
    job = client.get(location).json()
    while not (job["status"] == "running" and 0.1 < job["progress"] < 0.9):
        assert job["status"] in ("queued", "running") and time.monotonic() < deadline, job
        time.sleep(0.05)
        job = client.get(location).json()
    assert client.delete(location).status_code == 202
    job = wait_for_job(client, location, timeout=60)
    assert job["status"] == "cancelled" and job["progress"] < 0.9, job
    assert client.get(f"/v1/batches/{job['id']}/results").status_code == 409
