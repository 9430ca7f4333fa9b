"""Fit, update and backtest jobs on a real Dask cluster (``FANFOLD_JOB_EXECUTOR=dask``):
the same stored models and scores as in the service's own threads, progress and
cancellation across processes, time limits, a killed worker, an unreachable scheduler.

One LocalCluster for the module (2 worker processes, 1 thread each) that the apps reach
through ``dask_address``, as a deployment reaches its scheduler; every wait is bounded.
"""

from __future__ import annotations

import os
import signal
import socket
import time

import pytest
from distributed import Client, LocalCluster
from fastapi.testclient import TestClient
from sqlalchemy import select

from service.app import create_app
from service.config import Settings
from service.orm import Job, StoredModel

from ..helpers import dask_cluster, wait_for_job

ASYNC = {"Prefer": "respond-async"}
GIBBS = {"lags": 2, "prior": "independent", "chains": 2, "burn": 50, "keep": 100,
         "cross": 0.5, "seed": 5}
LONG = {**GIBBS, "chains": 1, "burn": 20_000, "keep": 10}  # about 15 s if run to the end


@pytest.fixture(scope="module")
def scheduler():
    with dask_cluster(2) as client:
        yield client


@pytest.fixture
def body(demo_body):
    return {k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")}


def _app(tmp_path, name: str, **settings) -> TestClient:
    return TestClient(create_app(Settings(database_url=f"sqlite:///{tmp_path / name}.db",
                                          rate_limit_per_minute=0, **settings)))


def _on_cluster(scheduler: Client, tmp_path, name: str, **settings) -> TestClient:
    return _app(tmp_path, name, job_executor="dask", dask_address=scheduler.scheduler.address,
                **settings)


def _job_tasks(scheduler: Client) -> set[str]:
    """Names of the tasks the scheduler has seen for jobs."""
    prefixes = scheduler.run_on_scheduler(lambda dask_scheduler: list(dask_scheduler.task_prefixes))
    return {p for p in prefixes if p.startswith("fanfold-job")}


def _stored(app: TestClient, model_id: str) -> dict:
    with app.app.state.sessions() as s:
        row = s.get(StoredModel, model_id)
        return {k: getattr(row, k) for k in ("posterior", "draws", "data", "settings", "lags",
                                             "hyperparameters", "diagnostics")}


def _fit(app: TestClient, body: dict) -> tuple[str, dict]:
    r = app.post("/v1/models", json=body, headers=ASYNC)
    assert r.status_code == 202, r.text
    job = wait_for_job(app, r.headers["location"], timeout=120)
    assert job["status"] == "succeeded", job
    return job["result"].rsplit("/", 1)[-1], job


def test_a_gibbs_fit_and_its_update_store_what_the_threads_store(scheduler, tmp_path, body):
    first = {**body, "series": {k: v[:-6] for k, v in body["series"].items()}, **GIBBS}
    later = {"series": {k: v[-6:] for k, v in body["series"].items()}}
    stored = {}
    for mode, app in (("threads", _app(tmp_path, "threads")),
                      ("dask", _on_cluster(scheduler, tmp_path, "dask"))):
        with app:
            model_id, job = _fit(app, first)
            assert job["attempts"] == 1
            fitted = _stored(app, model_id)
            r = app.post(f"/v1/models/{model_id}/observations", json=later)
            assert r.status_code == 202, r.text
            update = wait_for_job(app, r.headers["location"], timeout=120)
            assert update["status"] == "succeeded", update
            stored[mode] = (fitted, _stored(app, model_id),
                            app.get(f"/v1/models/{model_id}").json()["version"])
    assert _job_tasks(scheduler)  # the dask app's work ran as tasks on the cluster
    (fit_t, upd_t, version_t), (fit_d, upd_d, version_d) = stored["threads"], stored["dask"]
    assert fit_d == fit_t  # byte for byte: posterior, Gibbs draws, diagnostics, settings
    assert upd_d == upd_t and version_d == version_t == 2
    assert upd_d["draws"] != fit_d["draws"] and upd_d["lags"] == fit_d["lags"]


def test_a_backtest_on_the_cluster_scores_as_in_the_threads(scheduler, tmp_path, body):
    request = {**body, "series": {k: body["series"][k] for k in ("tyres", "brake_pads")},
               "lags": 1, "origins": 4, "horizon": 2, "draws": 100, "period": 12, "seed": 5}
    results = []
    for app in (_app(tmp_path, "bt-threads"), _on_cluster(scheduler, tmp_path, "bt-dask")):
        with app:
            r = app.post("/v1/backtests", json=request)
            job = wait_for_job(app, r.headers["location"], timeout=120)
            assert job["status"] == "succeeded", job
            results.append(app.get(job["result"]).json())
    assert results[0] == results[1]


def test_progress_and_cancel_reach_a_fit_running_on_a_worker(scheduler, tmp_path, body):
    with _on_cluster(scheduler, tmp_path, "cancel") as app:
        r = app.post("/v1/models", json={**body, **LONG}, headers=ASYNC)
        assert r.status_code == 202, r.text
        location = r.headers["location"]
        deadline = time.monotonic() + 60
        while (job := app.get(location).json())["progress"] <= 0.1:  # sweeps reported
            assert job["status"] in ("queued", "running") and time.monotonic() < deadline
            time.sleep(0.1)
        assert job["status"] == "running" and 0.1 < job["progress"] < 0.9
        asked = time.monotonic()
        assert app.delete(location).status_code in (200, 202)
        job = wait_for_job(app, location, timeout=30)
        assert job["status"] == "cancelled" and time.monotonic() - asked < 10
        # the task itself stopped: nothing runs on the cluster any more
        deadline = time.monotonic() + 20
        while any(scheduler.processing().values()):
            assert time.monotonic() < deadline, scheduler.processing()
            time.sleep(0.1)
        assert app.get("/v1/models").json()["data"] == []


def test_a_fit_past_its_time_limit_stops_on_the_worker(scheduler, tmp_path, body):
    with _on_cluster(scheduler, tmp_path, "limit", fit_timeout_s=1.0,
                     job_max_attempts=1) as app:
        started = time.monotonic()
        location = app.post("/v1/models", json={**body, **LONG},
                            headers=ASYNC).headers["location"]
        job = wait_for_job(app, location, timeout=30)
    assert job["status"] == "failed" and time.monotonic() - started < 15
    assert job["problem"]["title"] == "Time limit exceeded"


def test_a_worker_killed_mid_fit_is_survived_with_the_same_model(scheduler, tmp_path, body):
    request = {**body, **GIBBS, "burn": 6000}  # a few seconds of sweeps: time to kill
    with _on_cluster(scheduler, tmp_path, "kill") as app:
        location = app.post("/v1/models", json=request, headers=ASYNC).headers["location"]
        deadline = time.monotonic() + 60
        while not (busy := {w: t for w, t in scheduler.processing().items()
                            if any(k.startswith("fanfold-job") for k in t)}):
            assert time.monotonic() < deadline
            time.sleep(0.05)
        [worker] = busy
        pid = scheduler.run(os.getpid, workers=[worker])[worker]
        os.kill(pid, signal.SIGKILL)
        job = wait_for_job(app, location, timeout=120)
        assert job["status"] == "succeeded" and job["attempts"] == 1  # dask re-ran the task
        survived = _stored(app, job["result"].rsplit("/", 1)[-1])
    scheduler.wait_for_workers(2, timeout=60)
    with _app(tmp_path, "kill-threads") as app:
        model_id, _ = _fit(app, request)
        assert _stored(app, model_id) == survived


def test_bad_input_found_in_the_work_fails_the_job_with_its_problem(scheduler, tmp_path,
                                                                    body):
    # a constant series is found by the fit itself, on the worker; its error class does
    # not survive pickling as such, so it comes back as the problem document
    series = {**body["series"], "brake_pads": [5.0] * len(body["series"]["tyres"])}
    with _on_cluster(scheduler, tmp_path, "bad") as app:
        r = app.post("/v1/models", json={**body, **GIBBS, "series": series}, headers=ASYNC)
        assert r.status_code == 202, r.text
        job = wait_for_job(app, r.headers["location"], timeout=60)
    assert job["status"] == "failed", job
    assert job["problem"]["status"] == 422
    assert job["problem"]["type"] == "urn:fanfold:problem:ConstantSeriesError"
    assert "brake_pads" in job["problem"]["detail"]


def _closed_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_an_unreachable_scheduler_keeps_jobs_queued_and_readiness_down(tmp_path, body):
    address = f"tcp://127.0.0.1:{_closed_port()}"
    with _app(tmp_path, "down", job_executor="dask", dask_address=address) as app:
        r = app.get("/readyz")
        assert r.status_code == 503 and address in r.json()["detail"]
        assert r.headers["retry-after"] == "5"
        location = app.post("/v1/models", json={**body, **GIBBS},
                            headers=ASYNC).headers["location"]
        time.sleep(2.0)  # several claim rounds
        assert app.get(location).json()["status"] == "queued"  # waiting, not failed
        with app.app.state.sessions() as s:
            assert s.scalar(select(Job.attempts)) == 0


def test_readiness_checks_a_configured_scheduler(scheduler, tmp_path):
    with _on_cluster(scheduler, tmp_path, "ready") as app:
        assert app.get("/readyz").status_code == 200
    with _app(tmp_path, "batches-only", dask_address=scheduler.scheduler.address) as app:
        assert app.get("/readyz").status_code == 200  # batches use it: checked too
    with _app(tmp_path, "no-cluster") as app:  # nothing configured: not checked
        assert app.get("/readyz").status_code == 200
        assert app.app.state.jobs.cluster_problem() is None


def test_without_an_address_one_local_cluster_serves_jobs_and_batches(tmp_path, body):
    from ..batch.data import FAST, long_table

    table = long_table(3)
    table = table.assign(date=table["date"].dt.strftime("%Y-%m-%d"))
    batch = {"table": {c: table[c].tolist() for c in table}, "group_by": ["warehouse", "family"],
             "horizon": 2, "draws": 30, "seed": 9, **FAST, "transforms": None}
    with _app(tmp_path, "local", job_executor="dask", dask_workers=1,
              dask_processes=False) as app:
        cluster = app.app.state.jobs.cluster
        client = cluster.client()  # started with the app, before any job
        assert app.get("/readyz").status_code == 200
        _fit(app, {**body, **GIBBS})
        r = app.post("/v1/batches", json=batch)
        job = wait_for_job(app, r.headers["location"], timeout=90)
        assert job["status"] == "succeeded", job
        assert cluster.client() is client  # one cluster for both, kept between jobs
    assert cluster._client is None and client.status == "closed"  # shut down with the app


def test_a_scheduler_lost_mid_fit_sends_the_job_back_to_the_queue(tmp_path, body):
    cluster = LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                           dashboard_address="127.0.0.1:0", scheduler_port=0)
    try:
        with _app(tmp_path, "lost", job_executor="dask",
                  dask_address=cluster.scheduler_address) as app:
            location = app.post("/v1/models", json={**body, **LONG},
                                headers=ASYNC).headers["location"]
            deadline = time.monotonic() + 60
            while app.get(location).json()["progress"] <= 0.1:  # running on the worker
                assert time.monotonic() < deadline
                time.sleep(0.1)
            cluster.close(timeout=30)
            deadline = time.monotonic() + 60
            while (job := app.get(location).json())["status"] == "running":
                assert time.monotonic() < deadline, job
                time.sleep(0.1)
            # back in the queue for another attempt, not failed; and it waits there
            assert job["status"] == "queued" and job["attempts"] == 1, job
            assert app.get("/readyz").status_code == 503
    finally:
        cluster.close(timeout=30)
