"""End to end: a real uvicorn server on 127.0.0.1 in a subprocess (bounded waits)."""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.cli.commands import main
from service.config import Settings

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _start(port: int, log: Path, extra_env: dict[str, str] | None = None, *,
           workers: int = 1, stdout: Path | None = None) -> subprocess.Popen:
    env = {**os.environ, "FANFOLD_BLAS_THREADS": "1", **(extra_env or {})}
    with log.open("ab") as err:
        out = stdout.open("ab") if stdout is not None else subprocess.DEVNULL
        try:
            proc = subprocess.Popen(
                [sys.executable, "-m", "service", "serve", "--port", str(port),
                 "--workers", str(workers)],
                env=env, stdout=out, stderr=err)
        finally:
            if stdout is not None:
                out.close()
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(log.read_text())
        try:
            if httpx.get(f"http://127.0.0.1:{port}/readyz", timeout=1).status_code == 200:
                return proc
        except httpx.HTTPError:
            time.sleep(0.2)
    proc.kill()
    raise AssertionError("server did not become ready within 60 s")


def _stop(proc: subprocess.Popen) -> int:
    """SIGTERM, as an orchestrator sends it; uvicorn drains, then re-raises the signal."""
    proc.send_signal(signal.SIGTERM)
    try:
        return proc.wait(timeout=25)
    finally:
        if proc.poll() is None:
            proc.kill()


def test_real_server_answers_like_the_app_and_across_restarts(demo_body, tmp_path):
    port = _free_port()
    url = f"http://127.0.0.1:{port}/v1/forecasts"
    log = tmp_path / "server.log"
    proc = _start(port, log)
    try:
        first = httpx.post(url, json=demo_body, timeout=60)
        assert first.status_code == 200, first.text
        bad = httpx.post(url, json={**demo_body, "horizon": -1}, timeout=60)
        assert bad.status_code == 422
        assert bad.headers["content-type"] == "application/problem+json"
        # the example an inventory system would run, against the live server
        example = subprocess.run(
            [sys.executable, str(EXAMPLES / "inventory_forecast.py"), "--url",
             f"http://127.0.0.1:{port}"], capture_output=True, text=True, timeout=120)
        assert example.returncode == 0, example.stderr
        assert "lead time" in example.stdout and "inner_tubes" in example.stdout
        # stored model: fit, forecast, fan chart polled with ETag, new observations
        base = f"http://127.0.0.1:{port}/v1/models"
        first_rows = {k: v[:40] for k, v in demo_body["series"].items()}
        created = httpx.post(base, json={"series": first_rows, "start": "2016-01-01",
                                         "frequency": "MS", "lags": 2}, timeout=60)
        assert created.status_code == 201, created.text
        model_url = created.headers["location"]
        stored_fc = httpx.post(f"http://127.0.0.1:{port}{model_url}/forecasts",
                               json={"horizon": 3, "seed": 2}, timeout=60)
        chart = httpx.get(f"http://127.0.0.1:{port}{model_url}/fan-chart", timeout=60)
        polled = httpx.get(f"http://127.0.0.1:{port}{model_url}/fan-chart", timeout=60,
                           headers={"If-None-Match": chart.headers["etag"]})
        assert polled.status_code == 304
        rest = {k: v[40:] for k, v in demo_body["series"].items()}
        grown = httpx.post(f"http://127.0.0.1:{port}{model_url}/observations",
                           json={"series": rest, "start": "2019-05-01", "frequency": "MS"},
                           timeout=60)
        assert grown.status_code == 200 and grown.json()["version"] == 2
        after = httpx.get(f"http://127.0.0.1:{port}{model_url}/fan-chart", timeout=60,
                          headers={"If-None-Match": chart.headers["etag"]})
        assert after.status_code == 200
        grown_fc = httpx.post(f"http://127.0.0.1:{port}{model_url}/forecasts",
                              json={"horizon": 3, "seed": 2}, timeout=60)
        assert grown_fc.json() != stored_fc.json()
    finally:
        assert _stop(proc) in (0, -signal.SIGTERM)
    proc = _start(port, log)  # a new process on the same database: same seed, same bytes
    try:
        again = httpx.post(url, json=demo_body, timeout=60)
        stored_again = httpx.post(f"http://127.0.0.1:{port}{model_url}/forecasts",
                                  json={"horizon": 3, "seed": 2}, timeout=60)
    finally:
        _stop(proc)
    assert again.content == first.content
    assert stored_again.content == grown_fc.content
    with TestClient(create_app(Settings())) as c:
        assert c.post("/v1/forecasts", json=demo_body).content == first.content


def test_every_worker_writes_json_request_logs(demo_body, tmp_path):
    # With --workers 2 uvicorn runs the app in fresh processes; each must set up the
    # JSON logs itself, or its request lines are lost.
    port = _free_port()
    out = tmp_path / "stdout.log"
    proc = _start(port, tmp_path / "server.log",
                  {"FANFOLD_DATABASE_URL": f"sqlite:///{tmp_path / 'f.db'}"},
                  workers=2, stdout=out)
    try:
        rid = "workers-log-check"
        r = httpx.post(f"http://127.0.0.1:{port}/v1/forecasts",
                       json={**demo_body, "horizon": 2, "draws": 100},
                       headers={"X-Request-ID": rid}, timeout=60)
        assert r.status_code == 200, r.text
    finally:
        assert _stop(proc) == 0
    records = [json.loads(line) for line in out.read_text().splitlines()
               if line.startswith("{")]
    mine = [r for r in records if r.get("request_id") == rid]
    assert [(r["event"], r["route"], r["status"]) for r in mine] == [
        ("request", "/v1/forecasts", 200)]
    # both workers started with the JSON set-up (uvicorn's own lines, as JSON)
    started = [r for r in records if r["event"].startswith("Started server process")]
    assert len(started) == 2


def test_serve_refuses_non_loopback_without_api_keys(capsys):
    assert main(["serve", "--host", "0.0.0.0", "--port", "8000"]) == 2
    assert "loopback" in capsys.readouterr().err


@pytest.mark.parametrize("host", ["127.0.0.1", "::1", "localhost"])
def test_loopback_hosts_are_accepted(monkeypatch, host):
    import uvicorn

    calls = []
    monkeypatch.setattr(uvicorn, "run", lambda *a, **k: calls.append(k))
    assert main(["serve", "--host", host, "--port", "8123"]) == 0
    assert calls and calls[0]["host"] == host and calls[0]["factory"] is True


@pytest.fixture
def model_body_small(demo_body):
    return {**{k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")},
            "lags": 1}


def test_demo_data_shipped_with_the_package_equals_the_example():
    from service.demo import demo_frame

    assert (EXAMPLES / "bike_parts_demand.csv").read_bytes() == (
        Path(__file__).resolve().parents[2] / "service" / "demo" / "bike_parts_demand.csv"
    ).read_bytes()
    assert list(demo_frame().columns)[0] == "tyres"


def test_serve_demo_stores_a_model_and_prints_requests(monkeypatch, capsys):
    import uvicorn

    monkeypatch.setattr(uvicorn, "run", lambda *a, **k: None)
    assert main(["serve", "--demo", "--port", "8125"]) == 0
    out, err = capsys.readouterr()
    assert "demo model" in out and "/fan-chart?horizon=12" in out
    # says where the data go (it wrote fanfold.db into the working directory silently)
    database = Settings().database_url.removeprefix("sqlite:///")
    assert f"stored in the SQLite file {database}" in err
    model_id = out.split("demo model ")[1].split(":")[0]
    with TestClient(create_app(Settings())) as c:  # same database (FANFOLD_DATABASE_URL)
        assert c.get(f"/v1/models/{model_id}").json()["name"] == "bicycle-parts demo"


def test_kill_9_mid_job_then_restart_finishes_it(tmp_path, model_body_small):
    """A server killed with SIGKILL while a job is running: the next server re-queues the
    job once its lease runs out and finishes it; the database stays intact."""
    import sqlite3

    db = tmp_path / "crash.db"
    port = _free_port()
    log = tmp_path / "server.log"
    env_a = {"FANFOLD_DATABASE_URL": f"sqlite:///{db}", "FANFOLD_JOB_WORKERS": "0",
             "FANFOLD_JOB_LEASE_S": "1", "FANFOLD_JOB_RECOVERY_INTERVAL_S": "0.5"}
    proc = _start(port, log, env_a)
    try:
        r = httpx.post(f"http://127.0.0.1:{port}/v1/models", json=model_body_small,
                       headers={"Prefer": "respond-async"}, timeout=60)
        assert r.status_code == 202
        location = r.headers["location"]
        job_id = location.rsplit("/", 1)[1]
        with sqlite3.connect(db) as conn:  # its worker takes the job ... and dies
            conn.execute("UPDATE jobs SET status='running', attempts=1, "
                         "lease_until=datetime('now', '+1 second') WHERE id=?", (job_id,))
    finally:
        proc.kill()  # SIGKILL: no shutdown, no cleanup
        proc.wait(timeout=30)
    proc = _start(port, log, {**env_a, "FANFOLD_JOB_WORKERS": "1"})
    try:
        deadline = time.monotonic() + 60
        while True:
            job = httpx.get(f"http://127.0.0.1:{port}{location}", timeout=10).json()
            if job["status"] in ("succeeded", "failed"):
                break
            assert time.monotonic() < deadline, job
            time.sleep(0.2)
        assert job["status"] == "succeeded" and job["attempts"] == 2
        models = httpx.get(f"http://127.0.0.1:{port}/v1/models", timeout=10).json()["data"]
        assert [m["id"] for m in models] == [job["result"].rsplit("/", 1)[1]]
    finally:
        _stop(proc)
    with sqlite3.connect(db) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
