"""Several service replicas on one database, on SQLite and on PostgreSQL.

- Job claims: worker threads claiming at once take every job exactly once (row locks
  that skip locked rows on PostgreSQL; the conditional UPDATE on both).
- Migrations: processes starting at once on a fresh database wait for the one that
  migrates instead of crashing on "table already exists".
- Two real ``fanfold serve`` processes on one database, each with two job threads: 30
  queued fits each run exactly once (one attempt, one fit counted in all the servers'
  metrics together, one stored model per job), and both processes take some.

Bounded throughout: server start, polling and shutdown have deadlines.
"""

from __future__ import annotations

import re
import subprocess
import sys
import threading
import time
from pathlib import Path

import httpx
import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.app import create_app
from service.config import Settings
from service.db import make_engine
from service.migrate import at_head

from .test_server import _free_port, _start, _stop

pytestmark = pytest.mark.both_databases
ASYNC = {"Prefer": "respond-async"}


@pytest.fixture
def fit_body(demo_body):
    return {**{k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")},
            "lags": 1}


def test_concurrent_claims_take_each_job_once(database_url, fit_body):
    app = create_app(Settings(database_url=database_url, job_workers=0,
                              max_running_jobs_per_tenant=100))
    with TestClient(app) as c:
        for _ in range(12):
            assert c.post("/v1/models", json=fit_body, headers=ASYNC).status_code == 202
        runner, claims, lock = app.state.jobs, [], threading.Lock()
        start = threading.Barrier(4)

        def grab() -> None:
            start.wait()
            while (claim := runner._claim()) is not None:
                with lock:
                    claims.append(claim)

        threads = [threading.Thread(target=grab) for _ in range(4)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(60)
        assert sorted(a for _, a in claims) == [1] * 12  # first attempts only
        assert len({job_id for job_id, _ in claims}) == 12
        with app.state.sessions() as s:
            workers = s.scalars(sa.text("SELECT worker FROM jobs")).all()
        assert len(workers) == 12 and all(re.fullmatch(r".+:\d+:.+", w) for w in workers)


def test_a_claim_passes_over_a_job_another_replica_has_locked(database_kind, database_url,
                                                              fit_body):
    """SELECT ... FOR UPDATE SKIP LOCKED: while another replica's transaction holds the
    oldest queued job, a claim takes the next one at once instead of waiting."""
    if database_kind != "postgres":
        pytest.skip("SQLite has no row locks (its writers take turns on the database)")
    app = create_app(Settings(database_url=database_url, job_workers=0))
    other = make_engine(database_url)
    with TestClient(app) as c:
        ids = [c.post("/v1/models", json=fit_body, headers=ASYNC).json()["id"]
               for _ in range(2)]
        with other.connect() as conn:
            conn.begin()
            conn.execute(sa.text("SELECT id FROM jobs WHERE id = :id FOR UPDATE"),
                         {"id": ids[0]})
            got: list = []
            claimer = threading.Thread(target=lambda: got.append(app.state.jobs._claim()),
                                       daemon=True)
            claimer.start()
            claimer.join(10)
            assert got == [(ids[1], 1)], "the claim waited for the locked job"
            conn.rollback()
        claimer.join(10)
        assert app.state.jobs._claim() == (ids[0], 1)
    other.dispose()


# waits at a line on stdout until the test says go, then migrates
_MIGRATE = """
import sys
from service.db import make_engine
from service.migrate import upgrade
engine = make_engine(sys.argv[1])
engine.connect().close()
print("connected", flush=True)
upgrade(engine)
engine.dispose()
"""


def test_processes_migrating_a_fresh_database_at_once_all_start(database_url):
    """Every uvicorn worker and replica migrates at start. While one holds the migration
    lock the others wait (they crashed on "table alembic_version already exists" when
    they raced), also longer than SQLite's busy timeout, and once it is released they
    all finish, with the schema at head."""
    from service.migrate import _lock_schema

    holder = make_engine(database_url)
    procs: list[subprocess.Popen] = []
    try:
        with holder.connect() as conn:
            conn.begin()
            _lock_schema(conn)
            procs = [subprocess.Popen([sys.executable, "-c", _MIGRATE, database_url],
                                      stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                      text=True) for _ in range(3)]
            for p in procs:  # bounded: the child prints within its import time
                line = _readline(p, timeout=60)
                assert line == "connected", f"a migrating process did not start: {line!r}"
            time.sleep(6.0)  # past SQLite's busy_timeout of 5 s (a slow migration):
            # the waiting processes crashed on "database is locked" there
            assert [p.poll() for p in procs] == [None] * 3, "migrated without the lock"
            conn.rollback()
        errors = [p.communicate(timeout=60)[1] for p in procs]
        assert [p.returncode for p in procs] == [0] * 3, errors
        assert at_head(holder)
    finally:
        for p in procs:
            if p.poll() is None:
                p.kill()
            p.communicate(timeout=10)  # also closes the pipes
        holder.dispose()


def _readline(proc: subprocess.Popen, timeout: float) -> str:
    """The child's next stdout line, or "" after ``timeout`` seconds."""
    out: list[str] = []
    reader = threading.Thread(target=lambda: out.append(proc.stdout.readline().strip()),
                              daemon=True)
    reader.start()
    reader.join(timeout)
    return out[0] if out else ""


def _start_together(count: int, tmp_path: Path, env: dict[str, str]
                    ) -> list[tuple[str, subprocess.Popen]]:
    """``count`` servers started at once (they migrate the fresh database together)."""
    started: list[tuple[str, subprocess.Popen]] = []
    errors: list[BaseException] = []
    lock = threading.Lock()

    def one(i: int) -> None:
        port = _free_port()
        try:
            proc = _start(port, tmp_path / f"server{i}.log", env)
        except BaseException as exc:  # reported below, after the others started
            with lock:
                errors.append(exc)
            return
        with lock:
            started.append((f"http://127.0.0.1:{port}", proc))

    threads = [threading.Thread(target=one, args=(i,)) for i in range(count)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(90)
    if errors or len(started) != count:
        for _, proc in started:
            _stop(proc)
        raise AssertionError(f"servers did not start: {errors}")
    return started


def test_two_servers_on_one_database_run_each_job_exactly_once(database_url, tmp_path,
                                                                fit_body):
    env = {"FANFOLD_DATABASE_URL": database_url, "FANFOLD_JOB_WORKERS": "2",
           "FANFOLD_RATE_LIMIT_PER_MINUTE": "0", "FANFOLD_MAX_RUNNING_JOBS_PER_TENANT": "8"}
    servers = _start_together(2, tmp_path, env)
    try:
        locations = []
        with httpx.Client(timeout=30) as http:
            for i in range(30):  # alternately to each server, as a load balancer would
                base = servers[i % 2][0]
                r = http.post(f"{base}/v1/models", json={**fit_body, "name": f"job {i}"},
                              headers=ASYNC)
                assert r.status_code == 202, r.text
                locations.append(r.headers["location"])
            deadline, jobs = time.monotonic() + 120, {}
            while len(jobs) < len(locations):
                assert time.monotonic() < deadline, f"{len(jobs)} of 30 jobs ended in 120 s"
                for i, location in enumerate(locations):
                    if location not in jobs:
                        job = http.get(servers[i % 2][0] + location).json()
                        if job["status"] in ("succeeded", "failed", "cancelled"):
                            jobs[location] = job
                time.sleep(0.1)
            fits = sum(_fit_count(http.get(f"{base}/metrics").text) for base, _ in servers)
            models, cursor = [], None
            while True:
                page = http.get(f"{servers[0][0]}/v1/models",
                                params={"limit": 100, **({"cursor": cursor} if cursor
                                                         else {})}).json()
                models += page["data"]
                if not (cursor := page["next"]):
                    break
    finally:
        for _, proc in servers:
            _stop(proc)
    assert {j["status"] for j in jobs.values()} == {"succeeded"}
    assert [j["attempts"] for j in jobs.values()] == [1] * 30
    assert fits == 30  # every fit ran once, in one of the two servers
    results = sorted(j["result"].rsplit("/", 1)[1] for j in jobs.values())
    assert sorted(m["id"] for m in models) == results and len(set(results)) == 30
    assert sorted(m["name"] for m in models) == sorted(f"job {i}" for i in range(30))
    engine = make_engine(database_url)
    try:
        with engine.connect() as conn:
            workers = conn.exec_driver_sql("SELECT worker FROM jobs").scalars().all()
    finally:
        engine.dispose()
    pids = {w.split(":")[1] for w in workers}
    assert pids == {str(proc.pid) for _, proc in servers}, workers  # both took jobs


def _fit_count(metrics: str) -> int:
    match = re.search(r"^fanfold_fit_duration_seconds_count (\S+)$", metrics, re.M)
    return int(float(match.group(1))) if match else 0


def test_a_replica_killed_mid_job_leaves_it_to_the_other(database_url, tmp_path, fit_body):
    """Two servers; the one running a long fit is killed with SIGKILL: the other re-queues
    the job once its lease runs out, runs it to the end (attempt 2), and one model is
    stored."""
    env = {"FANFOLD_DATABASE_URL": database_url, "FANFOLD_JOB_WORKERS": "1",
           "FANFOLD_RATE_LIMIT_PER_MINUTE": "0", "FANFOLD_JOB_LEASE_S": "2",
           "FANFOLD_JOB_RECOVERY_INTERVAL_S": "0.5"}
    servers = _start_together(2, tmp_path, env)
    by_pid = {str(proc.pid): (base, proc) for base, proc in servers}
    engine = make_engine(database_url)
    long_fit = {**fit_body, "prior": "independent", "chains": 1, "burn": 6000, "keep": 50,
                "seed": 3}  # several seconds of Gibbs sweeps
    try:
        with httpx.Client(timeout=30) as http:
            r = http.post(f"{servers[0][0]}/v1/models", json=long_fit, headers=ASYNC)
            assert r.status_code == 202, r.text
            location, job_id = r.headers["location"], r.json()["id"]
            deadline = time.monotonic() + 60
            while True:  # running, past its first progress report: mid-fit
                with engine.connect() as conn:
                    status, progress, worker = conn.execute(sa.text(
                        "SELECT status, progress, worker FROM jobs WHERE id = :id"),
                        {"id": job_id}).one()
                if status == "running" and progress > 0.1:
                    break
                assert status == "queued" or status == "running", status
                assert time.monotonic() < deadline, "the job did not start within 60 s"
                time.sleep(0.05)
            victim_pid = worker.split(":")[1]
            _, victim = by_pid[victim_pid]
            victim.kill()  # SIGKILL: no shutdown, the job stays "running" with its lease
            victim.wait(30)
            survivor_base = next(b for pid, (b, _) in by_pid.items() if pid != victim_pid)
            deadline = time.monotonic() + 120
            while (job := http.get(survivor_base + location).json())["status"] in (
                    "queued", "running"):
                assert time.monotonic() < deadline, job
                time.sleep(0.2)
            models = http.get(f"{survivor_base}/v1/models").json()["data"]
    finally:
        for _, proc in servers:
            if proc.poll() is None:
                _stop(proc)
    with engine.connect() as conn:
        worker = conn.execute(sa.text("SELECT worker FROM jobs WHERE id = :id"),
                              {"id": job_id}).scalar_one()
    engine.dispose()
    assert job["status"] == "succeeded" and job["attempts"] == 2, job
    assert worker.split(":")[1] != victim_pid  # the survivor finished it
    assert [m["id"] for m in models] == [job["result"].rsplit("/", 1)[1]]
