"""Jobs in the server's threads or on Dask (FANFOLD_JOB_EXECUTOR): what the cluster path
costs and gives.

Scenario: Gibbs fits as background jobs (``Prefer: respond-async``) of three demo series,
VAR(2), independent prior, 2 chains of 500 + 1,000 sweeps, through the API in-process
(FastAPI's TestClient) on a SQLite file. Two set-ups on the same machine, each warmed up
by one job outside the timing:

- ``threads``: the jobs run in the server's job threads (``FANFOLD_JOB_WORKERS``);
- ``dask``: the job threads send each job's work to a LocalCluster of worker processes
  (one thread and one BLAS thread each) reached by address, and store what comes back.

Reports the latency of one job alone (submit to succeeded, median of ``--alone`` runs)
and the throughput of ``--jobs`` jobs submitted at once, side by side with their ratio
(dask over threads). On one machine the cluster can only add overhead (pickling the
request and the model's columns, the scheduler's round trips, progress through a
Variable); what it buys is that the fits leave the API's processes, for workers on
other machines, and that they run in processes: the job threads of one server process
share its interpreter lock, and the Gibbs sampler's sweeps are a Python loop, so two
job threads finish fits at little more than the rate of one.

    python tests/benchmarks/run_job_executor_benchmark.py [--jobs 20] [--alone 5]
        [--workers 2] [--out tests/benchmarks/results/job_executor.md]
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parents[1]))

from run_benchmarks import cpu_model, repo_commit, write_report  # noqa: E402

FIT = {"lags": 2, "prior": "independent", "chains": 2, "burn": 500, "keep": 1000,
       "cross": 0.5, "seed": 5}


def _body() -> dict:
    from service.demo import demo_frame

    part = demo_frame()[["tyres", "inner_tubes", "brake_pads"]]
    return {"series": {c: part[c].astype(float).tolist() for c in part},
            "start": str(part.index[0].date()), "frequency": "MS", **FIT}


def _wait(client, locations: list[str], limit_s: float = 900.0) -> None:
    deadline = time.monotonic() + limit_s
    pending = list(locations)
    while pending:
        if time.monotonic() > deadline:
            raise SystemExit(f"{len(pending)} jobs not finished within {limit_s} s")
        job = client.get(pending[0]).json()
        if job["status"] == "succeeded":
            pending.pop(0)
        elif job["status"] in ("failed", "cancelled"):
            raise SystemExit(f"a job ended {job['status']}: {job.get('problem')}")
        else:
            time.sleep(0.02)


def measure(settings_extra: dict, jobs: int, alone: int, folder: Path,
            warm: int) -> dict[str, float]:
    from fastapi.testclient import TestClient

    from service.app import create_app
    from service.config import Settings

    body = _body()
    settings = Settings(database_url=f"sqlite:///{folder / 'bench.db'}",
                        rate_limit_per_minute=0, **settings_extra)
    headers = {"Prefer": "respond-async"}
    with TestClient(create_app(settings)) as client:
        # warm-up of every job thread or worker: imports, kernels, connections
        _wait(client, [client.post("/v1/models", json=body, headers=headers)
                       .headers["location"] for _ in range(warm)])
        single = []
        for _ in range(alone):
            started = time.perf_counter()
            _wait(client, [client.post("/v1/models", json=body, headers=headers)
                           .headers["location"]])
            single.append(time.perf_counter() - started)
        started = time.perf_counter()
        locations = [client.post("/v1/models", json=body, headers=headers)
                     .headers["location"] for _ in range(jobs)]
        _wait(client, locations)
        elapsed = time.perf_counter() - started
    return {"alone_s": statistics.median(single), "jobs_per_s": jobs / elapsed}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=20)
    parser.add_argument("--alone", type=int, default=5)
    parser.add_argument("--workers", type=int, default=2, help="Dask worker processes")
    parser.add_argument("--out", default=str(HERE / "results" / "job_executor.md"))
    args = parser.parse_args(argv)

    from distributed import Client, LocalCluster

    load = os.getloadavg()[0]
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        (folder / "threads").mkdir()
        (folder / "dask").mkdir()
        threads = measure({"job_workers": args.workers}, args.jobs, args.alone,
                          folder / "threads", args.workers)
        with LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True,
                          dashboard_address="127.0.0.1:0", scheduler_port=0) as cluster, \
                Client(cluster, set_as_default=False) as client:
            client.wait_for_workers(args.workers, timeout=120)
            remote = measure({"job_workers": args.workers, "job_executor": "dask",
                              "dask_address": cluster.scheduler_address},
                             args.jobs, args.alone, folder / "dask", args.workers)
    lines = [
        "# Jobs in the server's threads or on Dask",
        "",
        f"commit {repo_commit('service', 'priors')}, {cpu_model()}, {os.cpu_count()} cores, "
        f"Python {platform.python_version()}; {args.workers} job threads, and "
        f"{args.workers} Dask worker processes for `dask`; load average {load:.2f} before",
        "",
        f"Gibbs fit jobs (3 series, VAR(2), 2 chains x (500 + 1,000) sweeps) through the "
        f"API; one job alone: median of {args.alone}; throughput: {args.jobs} jobs "
        "submitted at once.",
        "",
        "| | threads | dask | dask / threads |",
        "|---|---|---|---|",
        f"| one job alone, submit to succeeded (s) | {threads['alone_s']:.3f} | "
        f"{remote['alone_s']:.3f} | {remote['alone_s'] / threads['alone_s']:.2f} |",
        f"| jobs per second, {args.jobs} at once | {threads['jobs_per_s']:.2f} | "
        f"{remote['jobs_per_s']:.2f} | {remote['jobs_per_s'] / threads['jobs_per_s']:.2f} |",
        "",
    ]
    write_report("\n".join(lines), args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
