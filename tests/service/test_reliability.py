"""Reliability against real servers on 127.0.0.1 (bounded in examples, rounds and time).

- Schemathesis against the live OpenAPI document of a server with API keys, sending a
  valid key: no server error, documented status codes, content types, headers and
  response schemas, on every operation.
- Crash and restart: a server is killed with SIGKILL at random moments while it answers
  fits and runs jobs, ten times; after each restart every acknowledged model reads back
  byte-identical, SQLite's integrity check passes, and at the end no job is left
  running and every acknowledged job finished with the same numbers as a fit in this
  process with the same settings (an uninterrupted run).
"""

from __future__ import annotations

import random
import sqlite3
import time

import httpx
import pytest

from service.auth import new_key

from .test_server import _free_port, _start, _stop

KEY, ENTRY = new_key("ops", "acme")
AUTH = {"X-API-Key": KEY}


@pytest.fixture
def keyed_server(tmp_path):
    port = _free_port()
    env = {"FANFOLD_DATABASE_URL": f"sqlite:///{tmp_path / 'live.db'}",
           "FANFOLD_API_KEYS": f"[{ENTRY.model_dump_json()}]", "FANFOLD_JOB_WORKERS": "1",
           "FANFOLD_RATE_LIMIT_PER_MINUTE": "0"}
    proc = _start(port, tmp_path / "live.log", env)
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        _stop(proc)


def test_live_server_conforms_to_its_openapi_document(keyed_server):
    import schemathesis
    from hypothesis import HealthCheck, given, settings
    from schemathesis.checks import not_a_server_error
    from schemathesis.specs.openapi.checks import (
        content_type_conformance,
        response_headers_conformance,
        response_schema_conformance,
        status_code_conformance,
    )

    document = httpx.get(f"{keyed_server}/openapi.json", headers=AUTH, timeout=30)
    assert document.status_code == 200
    api = schemathesis.openapi.from_dict(document.json())
    checks = [not_a_server_error, status_code_conformance, content_type_conformance,
              response_headers_conformance, response_schema_conformance]
    tested = []
    for result in api.get_all_operations():
        operation = result.ok()

        @given(case=operation.as_strategy())
        @settings(max_examples=5, deadline=None, derandomize=True, database=None,
                  suppress_health_check=list(HealthCheck))
        def check(case):
            case.call_and_validate(base_url=keyed_server, headers=AUTH, checks=checks,
                                   timeout=30)

        check()
        tested.append(operation.label)
    assert len(tested) == 23, tested  # every operation: batches and chart images included


def test_sigterm_under_load_finishes_what_is_in_flight(tmp_path, demo):
    """SIGTERM (what an orchestrator sends): the requests already being answered finish
    with their answers, and the process exits within the drain time (20 s)."""
    import signal
    from concurrent.futures import ThreadPoolExecutor

    port = _free_port()
    base = f"http://127.0.0.1:{port}"
    env = {"FANFOLD_DATABASE_URL": f"sqlite:///{tmp_path / 'drain.db'}",
           "FANFOLD_RATE_LIMIT_PER_MINUTE": "0"}
    proc = _start(port, tmp_path / "drain.log", env)
    body = {**_body(demo, 0), "horizon": 24, "draws": 4000, "seed": 1}
    body.pop("name")
    try:
        with ThreadPoolExecutor(max_workers=6) as pool:
            calls = [pool.submit(httpx.post, f"{base}/v1/forecasts", json=body, timeout=60)
                     for _ in range(6)]
            time.sleep(0.3)  # the requests are in flight
            proc.send_signal(signal.SIGTERM)
            started = time.monotonic()
            answers = [c.result() for c in calls]
        code = proc.wait(timeout=25)
        assert time.monotonic() - started < 20.5
    finally:
        if proc.poll() is None:
            proc.kill()
    assert [a.status_code for a in answers] == [200] * 6  # none cut off
    assert len({a.content for a in answers}) == 1  # whole answers (same seed, same bytes)
    assert code in (0, -signal.SIGTERM)


def _body(demo, seed: int) -> dict:
    part = demo.iloc[:60][["tyres", "inner_tubes", "brake_pads"]]
    return {"series": {c: part[c].astype(float).tolist() for c in part},
            "start": "2016-01-01", "frequency": "MS", "lags": 1 + seed % 2,
            "transforms": "none", "seasonal": False, "sum_coef": None, "initial": None,
            "name": f"round-{seed}"}


def test_kill_9_at_random_moments_loses_nothing_acknowledged(tmp_path, demo):
    from service.compute.engine import fit_model
    from service.config import Settings
    from service.schemas import ModelCreate

    db = tmp_path / "crash.db"
    port = _free_port()
    base = f"http://127.0.0.1:{port}"
    env = {"FANFOLD_DATABASE_URL": f"sqlite:///{db}", "FANFOLD_JOB_WORKERS": "1",
           "FANFOLD_JOB_LEASE_S": "1", "FANFOLD_JOB_RECOVERY_INTERVAL_S": "0.3",
           "FANFOLD_RATE_LIMIT_PER_MINUTE": "0"}
    rng = random.Random(20261204)
    acknowledged: dict[str, bytes] = {}  # model id -> its body as read when acknowledged
    jobs: dict[str, int] = {}  # job location -> the seed of its request
    rounds = 10
    for round_ in range(rounds):
        proc = _start(port, tmp_path / "server.log", env)
        try:
            for model_id, body in acknowledged.items():  # everything still there, same bytes
                assert httpx.get(f"{base}/v1/models/{model_id}", timeout=30).content == body
            with httpx.Client(timeout=30) as client:
                seed = 2 * round_
                made = client.post(f"{base}/v1/models", json=_body(demo, seed))
                assert made.status_code == 201, made.text
                model_id = made.json()["id"]
                acknowledged[model_id] = client.get(f"{base}/v1/models/{model_id}").content
                queued = client.post(f"{base}/v1/models", json=_body(demo, seed + 1),
                                     headers={"Prefer": "respond-async"})
                assert queued.status_code == 202
                jobs[queued.headers["location"]] = seed + 1
            time.sleep(rng.uniform(0.0, 0.6))  # the job may be queued, running or done
        finally:
            proc.kill()  # SIGKILL: no drain, no cleanup
            proc.wait(timeout=30)
        with sqlite3.connect(db) as conn:
            assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    proc = _start(port, tmp_path / "server.log", env)
    try:
        deadline = time.monotonic() + 120
        finished: dict[str, dict] = {}
        while len(finished) < len(jobs):
            assert time.monotonic() < deadline, f"jobs not finished: {set(jobs) - set(finished)}"
            for location in set(jobs) - set(finished):
                job = httpx.get(f"{base}{location}", timeout=30).json()
                if job["status"] in ("succeeded", "failed", "cancelled"):
                    finished[location] = job
            time.sleep(0.2)
        for model_id, body in acknowledged.items():
            assert httpx.get(f"{base}/v1/models/{model_id}", timeout=30).content == body
        limits = Settings()
        for location, job in finished.items():
            assert job["status"] == "succeeded", job
            stored = httpx.get(f"{base}{job['result']}", timeout=30).json()
            reference = fit_model(ModelCreate.model_validate(_body(demo, jobs[location])),
                                  _frame(demo), limits).model
            assert [c["mean"] for c in stored["coefficients"]] == pytest.approx(
                reference.coefficients()["mean"].tolist(), rel=1e-12, abs=1e-12)
        names = sorted(m["name"] for m in httpx.get(f"{base}/v1/models?limit=100",
                                                    timeout=30).json()["data"])
        assert names == sorted(f"round-{s}" for s in range(2 * rounds))  # no duplicates
    finally:
        _stop(proc)
    with sqlite3.connect(db) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        running = conn.execute("SELECT COUNT(*) FROM jobs WHERE status='running'").fetchone()
        assert running[0] == 0


def _frame(demo):
    from service.compute.engine import frame_from_spec
    from service.schemas import ModelCreate

    return frame_from_spec(ModelCreate.model_validate(_body(demo, 0)))
