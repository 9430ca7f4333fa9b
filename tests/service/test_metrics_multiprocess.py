"""Metrics across worker processes (PROMETHEUS_MULTIPROC_DIR, service/metrics.py).

prometheus-client chooses file-backed values when it is imported, so every process that
writes metrics here is a fresh interpreter started with the variable set.
"""

from __future__ import annotations

import glob
import os
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
from prometheus_client import Counter, Gauge, Histogram
from prometheus_client.multiprocess import MultiProcessCollector
from prometheus_client.parser import text_string_to_metric_families

from service.metrics import MULTIPROC_ENV, Metrics, prepare_multiprocess_dir

from .test_server import _free_port, _start, _stop

ROOT = Path(__file__).resolve().parents[2]

# writes its share, says its pid, and stays alive until stdin closes (so the two
# writers are alive together and cannot share a pid)
WRITER = """
import sys
from service.metrics import Metrics
m = Metrics()
assert m.multiprocess
m.requests.labels("GET", "/livez", "200").inc(int(sys.argv[1]))
m.fit.observe(0.3)
print(__import__("os").getpid(), flush=True)
sys.stdin.read()
"""

# what a scrape of /metrics answers in a third process
READER = """
import sys
from fastapi.testclient import TestClient
from service.app import create_app
from service.config import Settings
app = create_app(Settings(database_url=f"sqlite:///{sys.argv[1]}"))
r = TestClient(app).get("/metrics")
assert r.status_code == 200, r.text
sys.stdout.write(r.text)
"""


def _env(directory: Path) -> dict[str, str]:
    return {**os.environ, MULTIPROC_ENV: str(directory), "PYTHONPATH": str(ROOT)}


def _samples(text: str) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    return {(s.name, tuple(sorted(s.labels.items()))): s.value
            for family in text_string_to_metric_families(text) for s in family.samples}


LIVEZ_OK = ("fanfold_http_requests_total",
            (("method", "GET"), ("route", "/livez"), ("status", "200")))


def test_metrics_written_by_two_processes_add_up_in_metrics(tmp_path):
    directory = tmp_path / "prom"
    directory.mkdir()
    writers = [subprocess.Popen([sys.executable, "-c", WRITER, str(n)], env=_env(directory),
                                stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
               for n in (3, 4)]
    try:
        pids = {w.stdout.readline().strip() for w in writers}
    finally:
        for w in writers:
            w.communicate(timeout=60)
    assert all(w.returncode == 0 for w in writers)
    assert len(pids) == 2
    assert {Path(f).name for f in glob.glob(str(directory / "counter_*.db"))} == {
        f"counter_{pid}.db" for pid in pids}

    scrape = subprocess.run([sys.executable, "-c", READER, str(tmp_path / "r.db")],
                            env=_env(directory), capture_output=True, text=True, timeout=120)
    assert scrape.returncode == 0, scrape.stderr
    samples = _samples(scrape.stdout)
    assert samples[LIVEZ_OK] == 7.0
    assert samples[("fanfold_fit_duration_seconds_count", ())] == 2.0
    assert samples[("fanfold_fit_duration_seconds_sum", ())] == pytest.approx(0.6)
    assert samples[("fanfold_fit_duration_seconds_bucket", (("le", "0.5"),))] == 2.0


def test_without_the_variable_each_app_has_its_own_registry(monkeypatch):
    monkeypatch.delenv(MULTIPROC_ENV, raising=False)
    a, b = Metrics(), Metrics()
    assert not a.multiprocess and a.registry is not b.registry
    a.requests.labels("GET", "/livez", "200").inc()
    assert a.registry.get_sample_value(
        "fanfold_http_requests_total", dict(LIVEZ_OK[1])) == 1.0
    assert b.registry.get_sample_value(
        "fanfold_http_requests_total", dict(LIVEZ_OK[1])) is None


def test_a_variable_set_after_the_client_was_imported_is_refused(monkeypatch, tmp_path):
    # this test process imported prometheus_client without the variable
    monkeypatch.setenv(MULTIPROC_ENV, str(tmp_path))
    with pytest.raises(RuntimeError, match=MULTIPROC_ENV):
        Metrics()


@pytest.mark.parametrize(("value", "message"), [("", "is empty"),
                                                  ("missing", "is not a directory")])
def test_an_empty_or_missing_directory_is_refused(tmp_path, value, message):
    env = {**_env(tmp_path), MULTIPROC_ENV: value and str(tmp_path / value)}
    run = subprocess.run([sys.executable, "-c", "from service.metrics import Metrics; Metrics()"],
                         env=env, capture_output=True, text=True, timeout=60)
    assert run.returncode != 0 and message in run.stderr


def test_serve_creates_the_directory_and_removes_the_last_runs_files(monkeypatch, tmp_path):
    monkeypatch.delenv(MULTIPROC_ENV, raising=False)
    assert prepare_multiprocess_dir() is None
    directory = tmp_path / "new" / "prom"
    monkeypatch.setenv(MULTIPROC_ENV, str(directory))
    assert prepare_multiprocess_dir() == str(directory) and directory.is_dir()
    (directory / "counter_123.db").write_bytes(b"old")
    (directory / "histogram_123.db").write_bytes(b"old")
    (directory / "README").write_text("not ours")
    prepare_multiprocess_dir()
    assert sorted(p.name for p in directory.iterdir()) == ["README"]


def test_no_gauges_so_no_process_needs_marking_dead(monkeypatch):
    # mark_process_dead only matters for live* gauges (service/metrics.py docstring);
    # adding a gauge needs a worker-exit hook first
    monkeypatch.delenv(MULTIPROC_ENV, raising=False)
    collectors = [v for v in vars(Metrics()).values() if hasattr(v, "_type")]
    assert collectors and all(isinstance(c, Counter | Histogram) for c in collectors)
    assert not any(isinstance(c, Gauge) for c in collectors)


def _per_process_livez(directory: Path) -> dict[str, float]:
    """The /livez count in each worker's own file (read directly, not through a server)."""
    counts = {}
    for path in glob.glob(str(directory / "counter_*.db")):
        total = 0.0
        for family in MultiProcessCollector.merge([path]):
            total += sum(s.value for s in family.samples
                         if s.name == LIVEZ_OK[0] and s.labels.get("route") == "/livez")
        counts[Path(path).stem.split("_", 1)[1]] = total
    return counts


def test_a_real_server_with_two_workers_counts_every_request(tmp_path):
    directory = tmp_path / "prom"
    directory.mkdir()
    (directory / "counter_99999999.db").write_bytes(b"from an earlier run")  # wiped
    port = _free_port()
    env = {MULTIPROC_ENV: str(directory),
           "FANFOLD_DATABASE_URL": f"sqlite:///{tmp_path / 'w.db'}"}
    proc = _start(port, tmp_path / "server.log", env, workers=2)
    sent = lost = 0  # lost: the connection broke (a worker the supervisor replaced)
    try:
        deadline = time.monotonic() + 60
        # new connections until two workers have answered some (the kernel decides who)
        while time.monotonic() < deadline:
            for _ in range(20):
                try:
                    assert httpx.get(f"http://127.0.0.1:{port}/livez", timeout=10).is_success
                    sent += 1
                except httpx.TransportError:
                    lost += 1
            per_process = _per_process_livez(directory)
            if sum(count > 0 for count in per_process.values()) >= 2:
                break
        assert sum(count > 0 for count in per_process.values()) >= 2, per_process
        scrapes = [httpx.get(f"http://127.0.0.1:{port}/metrics", timeout=10).text
                   for _ in range(6)]
    finally:
        _stop(proc)
    assert "99999999" not in per_process
    total = sum(per_process.values())
    assert sent <= total <= sent + lost
    # every scrape has the total over all workers' files, whichever worker answered it
    assert all(_samples(text)[LIVEZ_OK] == total for text in scrapes)
