"""End to end: a real uvicorn server on 127.0.0.1 in a subprocess (bounded waits)."""

from __future__ import annotations

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
from service.cli import main
from service.config import Settings

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _start(port: int, log: Path) -> subprocess.Popen:
    env = {**os.environ, "FANFOLD_BLAS_THREADS": "1"}
    with log.open("ab") as err:
        proc = subprocess.Popen(
            [sys.executable, "-m", "service", "serve", "--port", str(port)],
            env=env, stdout=subprocess.DEVNULL, stderr=err)
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
    finally:
        assert _stop(proc) in (0, -signal.SIGTERM)
    proc = _start(port, log)  # a new process: same seed, same bytes
    try:
        again = httpx.post(url, json=demo_body, timeout=60)
    finally:
        _stop(proc)
    assert again.content == first.content
    with TestClient(create_app(Settings())) as c:
        assert c.post("/v1/forecasts", json=demo_body).content == first.content


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
