"""Crash/restart soak: a real server killed with SIGKILL again and again while it fits.

Each round starts ``fanfold serve`` on one SQLite file (loopback, a free port), queues a
few fits as jobs (conjugate and Gibbs), waits a random fraction of a second and kills
the server with SIGKILL (no shutdown). After the last round one server runs until every
job has ended. Checks: every job ends (succeeded, or failed with a problem after its
attempts), each succeeded job stored exactly one model and no model is left without a
job, and SQLite's integrity check passes. Figures: rounds, jobs, attempts, wall time.

    python tests/benchmarks/run_soak.py [--rounds 20] [--out tests/benchmarks/results/soak.md]
"""

from __future__ import annotations

import argparse
import os
import random
import signal
import socket
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import httpx
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parents[1]))

from run_benchmarks import cpu_model, repo_commit, write_report  # noqa: E402
from run_service_benchmark import start_server  # noqa: E402

DEMO = HERE.parents[1] / "examples" / "bike_parts_demand.csv"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _start(port: int, env: dict[str, str], log: Path) -> subprocess.Popen:
    return start_server([sys.executable, "-m", "service", "serve", "--port", str(port)],
                        port, log, {**os.environ, **env}, [])


def _bodies() -> list[dict]:
    frame = pd.read_csv(DEMO, index_col=0, parse_dates=True)
    base = {"series": {c: frame[c].astype(float).tolist() for c in frame.columns[:3]},
            "start": "2016-01-01", "frequency": "MS"}
    return [{**base, "lags": 2, "name": "conjugate"},
            {**base, "lags": 2, "prior": "independent", "cross": 0.5, "chains": 2,
             "burn": 500, "keep": 4000, "seed": 1, "name": "gibbs"}]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=20)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--out", default=str(HERE / "results" / "soak.md"))
    args = ap.parse_args(argv)
    rnd = random.Random(args.seed)
    work = Path(tempfile.mkdtemp(prefix="fanfold-soak-"))
    db, log = work / "soak.db", work / "server.log"
    env = {"FANFOLD_DATABASE_URL": f"sqlite:///{db}", "FANFOLD_JOB_WORKERS": "1",
           "FANFOLD_JOB_LEASE_S": "1", "FANFOLD_JOB_RECOVERY_INTERVAL_S": "0.5",
           "FANFOLD_JOB_MAX_ATTEMPTS": str(args.rounds + 5), "FANFOLD_BLAS_THREADS": "1"}
    bodies = _bodies()
    jobs: list[str] = []
    started = time.perf_counter()
    for _ in range(args.rounds):
        port = _free_port()
        proc = _start(port, env, log)
        for body in bodies:
            r = httpx.post(f"http://127.0.0.1:{port}/v1/models", json=body, timeout=60,
                           headers={"Prefer": "respond-async"})
            assert r.status_code == 202, r.text
            jobs.append(r.headers["location"])
        time.sleep(rnd.uniform(0.1, 1.5))
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
    port = _free_port()
    proc = _start(port, env, log)
    try:
        deadline = time.monotonic() + 900
        final = {}
        while len(final) < len(jobs):
            for loc in jobs:
                if loc in final:
                    continue
                job = httpx.get(f"http://127.0.0.1:{port}{loc}", timeout=10).json()
                if job["status"] in ("succeeded", "failed", "cancelled"):
                    final[loc] = job
            if time.monotonic() > deadline:
                raise RuntimeError(f"{len(jobs) - len(final)} jobs still running after 900 s")
            time.sleep(0.5)
        models, cursor = [], None
        while True:
            page = httpx.get(f"http://127.0.0.1:{port}/v1/models", timeout=10,
                             params={"limit": 100, **({"cursor": cursor} if cursor else {})})
            models += page.json()["data"]
            cursor = page.json()["next"]
            if not cursor:
                break
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=30)
    elapsed = time.perf_counter() - started
    succeeded = [j for j in final.values() if j["status"] == "succeeded"]
    results = sorted(j["result"].rsplit("/", 1)[1] for j in succeeded)
    stored = sorted(m["id"] for m in models)
    with sqlite3.connect(db) as conn:
        integrity = conn.execute("PRAGMA integrity_check").fetchone()[0]
    attempts = [j["attempts"] for j in final.values()]
    ok = (results == stored and len(set(results)) == len(results) and integrity == "ok"
          and all(j["status"] == "succeeded" for j in final.values()))
    lines = [
        "# Fanfold crash/restart soak", "",
        f"- commit {repo_commit('service')}; {cpu_model()}; SQLite; one job thread; lease 1 s",
        f"- {args.rounds} rounds: start, queue a conjugate and a Gibbs fit, SIGKILL after "
        "0.1-1.5 s; then one server runs until every job has ended", "",
        "| rounds | jobs | succeeded | failed | models stored | one model per job | "
        "max attempts | integrity | wall time s | result |",
        "|---|---|---|---|---|---|---|---|---|---|",
        f"| {args.rounds} | {len(jobs)} | {len(succeeded)} | "
        f"{sum(j['status'] == 'failed' for j in final.values())} | {len(stored)} | "
        f"{'yes' if results == stored else 'NO'} | {max(attempts)} | {integrity} | "
        f"{elapsed:.0f} | {'pass' if ok else 'FAIL'} |",
    ]
    write_report("\n".join(lines) + "\n", args.out)
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
