"""Background fits: 202 + job polling, failures as problems, cancel, crash recovery."""

from __future__ import annotations

import datetime as dt
import time

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import update

from service.app import create_app
from service.config import Settings
from service.orm import Job

from .helpers import wait_for_job

ASYNC = {"Prefer": "respond-async"}
pytestmark = pytest.mark.both_databases


@pytest.fixture
def model_body(demo_body):
    body = {k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")}
    return {**body, "lags": 2}


def test_async_fit_runs_as_a_job_and_links_the_model(client, model_body):
    r = client.post("/v1/models", json=model_body, headers=ASYNC)
    assert r.status_code == 202 and r.headers["location"].startswith("/v1/jobs/")
    assert r.json()["status"] in ("queued", "running", "succeeded")
    job = wait_for_job(client, r.headers["location"])
    assert job["status"] == "succeeded" and job["progress"] == 1.0 and job["attempts"] == 1
    stored = client.get(job["result"]).json()
    direct = client.post("/v1/models", json=model_body).json()
    assert stored["coefficients"] == direct["coefficients"]
    assert "fanfold_fit_duration_seconds_count 2.0" in client.get("/metrics").text


def test_a_failing_fit_ends_failed_with_a_problem(client, model_body):
    body = {**model_body, "series": {"tyres": [5.0] * 48, "chains": list(range(48))}}
    r = client.post("/v1/models", json=body, headers=ASYNC)
    job = wait_for_job(client, r.headers["location"])
    assert job["status"] == "failed" and job["result"] is None
    assert job["problem"]["status"] == 422 and "no variation" in job["problem"]["detail"]


def test_cancel_a_queued_job(database_url, model_body):
    settings = Settings(database_url=database_url, job_workers=0)
    with TestClient(create_app(settings)) as c:
        location = c.post("/v1/models", json=model_body, headers=ASYNC).headers["location"]
        assert c.get(location).json()["status"] == "queued"
        r = c.delete(location)
        assert r.status_code == 202 and r.json()["status"] == "cancelled"
        assert c.delete(location).status_code == 409
        assert c.get("/v1/jobs/00000000-0000-4000-8000-000000000000").status_code == 404


def test_jobs_left_running_by_a_crash_are_requeued_then_failed(database_url, model_body):
    settings = Settings(database_url=database_url, job_workers=0,
                        job_max_attempts=2)
    app = create_app(settings)
    with TestClient(app) as c:
        location = c.post("/v1/models", json=model_body, headers=ASYNC).headers["location"]
        runner, sessions = app.state.jobs, app.state.sessions
        past = dt.datetime.now(dt.UTC) - dt.timedelta(seconds=1)
        for attempt in (1, 2):
            job_id, claimed = runner._claim()  # a worker takes it ... and dies
            assert claimed == attempt
            with sessions() as s:
                s.execute(update(Job).where(Job.id == job_id).values(lease_until=past))
                s.commit()
            assert runner.recover() == 1
        assert "fanfold_jobs_recovered_total 2.0" in c.get("/metrics").text
        job = c.get(location).json()
        assert job["status"] == "failed" and job["attempts"] == 2
        assert "stopped 2 time(s)" in job["problem"]["detail"]


def test_a_restart_finishes_what_a_crashed_server_left(database_url, model_body):
    first = create_app(Settings(database_url=database_url, job_workers=0))
    with TestClient(first) as c:
        location = c.post("/v1/models", json=model_body, headers=ASYNC).headers["location"]
        job_id, _ = first.state.jobs._claim()  # running when the "crash" happens
        with first.state.sessions() as s:
            s.execute(update(Job).where(Job.id == job_id).values(
                lease_until=dt.datetime.now(dt.UTC) - dt.timedelta(seconds=1)))
            s.commit()
    with TestClient(create_app(Settings(database_url=database_url, job_workers=1))) as c:
        job = wait_for_job(c, location)
        assert job["status"] == "succeeded" and job["attempts"] == 2
        assert c.get(job["result"]).status_code == 200


def test_a_superseded_worker_cannot_overwrite_the_job(database_url, model_body):
    settings = Settings(database_url=database_url, job_workers=0)
    app = create_app(settings)
    with TestClient(app) as c:
        location = c.post("/v1/models", json=model_body, headers=ASYNC).headers["location"]
        runner = app.state.jobs
        job_id, first_attempt = runner._claim()
        with app.state.sessions() as s:  # lease runs out; the job is re-queued and re-claimed
            s.execute(update(Job).where(Job.id == job_id).values(
                lease_until=dt.datetime.now(dt.UTC) - dt.timedelta(seconds=1)))
            s.commit()
        runner.recover()
        _, second_attempt = runner._claim()
        runner.run_one(job_id, first_attempt)  # the old worker wakes up and finishes
        assert c.get(location).json()["status"] == "running"  # ... and changes nothing
        assert c.get("/v1/models").json()["data"] == []
        runner.run_one(job_id, second_attempt)
        assert c.get(location).json()["status"] == "succeeded"
        assert len(c.get("/v1/models").json()["data"]) == 1


def test_heartbeat_keeps_a_long_fit_leased(database_url, model_body, monkeypatch):
    import service.jobs.work as jobs

    real = jobs.fit_model

    def slow_fit(*args, **kwargs):
        time.sleep(3.0)  # several leases long
        return real(*args, **kwargs)

    monkeypatch.setattr(jobs, "fit_model", slow_fit)
    settings = Settings(database_url=database_url, job_workers=1,
                        job_lease_s=1.0, job_recovery_interval_s=0.1)
    # a lease of 1 s renewed every third of it: wide enough margins for a loaded machine
    # (at 0.3 s a busy CI run once missed a beat)
    with TestClient(create_app(settings)) as c:
        location = c.post("/v1/models", json=model_body, headers=ASYNC).headers["location"]
        job = wait_for_job(c, location)
    assert job["status"] == "succeeded" and job["attempts"] == 1  # never taken away


def test_fit_past_its_time_limit_loses_the_lease(database_url, model_body, monkeypatch):
    import service.jobs.work as jobs

    monkeypatch.setattr(jobs, "fit_model", lambda *a, **k: time.sleep(1.5))
    settings = Settings(database_url=database_url, job_workers=1,
                        job_lease_s=0.2, job_recovery_interval_s=0.1, fit_timeout_s=0.3,
                        job_max_attempts=1)
    with TestClient(create_app(settings)) as c:
        location = c.post("/v1/models", json=model_body, headers=ASYNC).headers["location"]
        job = wait_for_job(c, location)
    assert job["status"] == "failed" and "stopped 1 time(s)" in job["problem"]["detail"]


def test_a_fit_past_its_time_limit_stops_itself(database_url, model_body):
    """The engine checks the job's time limit between Gibbs sweeps (priors.cancellation):
    the job fails with a clear problem soon after the limit instead of running on."""
    settings = Settings(database_url=database_url, job_workers=1,
                        fit_timeout_s=0.5, job_max_attempts=1)
    long_fit = {**model_body, "prior": "independent", "chains": 1, "burn": 20_000,
                "keep": 10, "seed": 3}  # about 15 s if it ran to the end
    with TestClient(create_app(settings)) as c:
        start = time.monotonic()
        location = c.post("/v1/models", json=long_fit, headers=ASYNC).headers["location"]
        job = wait_for_job(c, location, timeout=10.0)
        assert time.monotonic() - start < 5.0
        assert c.get("/v1/models").json()["data"] == []
    assert job["status"] == "failed"
    assert job["problem"]["title"] == "Time limit exceeded"
    assert "0.5 s" in job["problem"]["detail"]


def test_running_jobs_are_capped_per_tenant(database_url, model_body):
    settings = Settings(database_url=database_url, job_workers=0,
                        max_running_jobs_per_tenant=2)
    app = create_app(settings)
    with TestClient(app) as c:
        for _ in range(3):
            c.post("/v1/models", json=model_body, headers=ASYNC)
        runner = app.state.jobs
        assert runner._claim() is not None and runner._claim() is not None
        assert runner._claim() is None  # the tenant already runs two
