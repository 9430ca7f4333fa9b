"""Throughput of batch forecasting on dask.distributed (service/batch).

Scenario (the issue's): 2,000 groups, each n=3 series of T=120 months from a stationary
VAR(4), fitted as VAR(4) (the fixed configuration of the speed targets, tightness tuned)
and forecast 12 steps with 500 draws; run on a LocalCluster of 1 and of 2 worker
processes (one thread and one BLAS thread each). Reports groups per second, the scaling
ratio (target >= 1.7x from 1 to 2 workers on 2 cores) and the peak memory (max RSS) of
each worker process. Each cluster is warmed up first (imports, compiled kernels) on a
few groups outside the timing.

    python tests/benchmarks/run_batch_benchmark.py [--groups 2000] [--workers 1,2]
        [--out tests/benchmarks/results/batch.md]

Run the full size on a quiet machine; ``--groups 100`` checks that it works.
"""

from __future__ import annotations

import argparse
import os
import platform
import resource
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")  # this process too (splitting the table)
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parents[1]))

from run_benchmarks import FIXED_CONFIG, cpu_model, repo_commit, simulate_var, write_report  # noqa: E402,I001

N, P, T, DRAWS, H = 3, 4, 120, 500, 12


def long_table(groups: int) -> pd.DataFrame:
    """``groups`` groups of N series (demand-like levels around 500) in long format."""
    dates = pd.date_range("2015-01-01", periods=T, freq="MS")
    parts = []
    for g in range(groups):
        y = 500 + 20 * simulate_var(N, P, T, seed=g)
        for j in range(N):
            parts.append(pd.DataFrame({"date": dates, "warehouse": f"wh{g % 20:02d}",
                                       "family": f"fam{g // 20:04d}", "series": f"part{j}",
                                       "value": y[:, j]}))
    return pd.concat(parts, ignore_index=True)


def _maxrss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux


def measure(groups, spec, workers: int) -> dict[str, float]:
    from distributed import Client, LocalCluster

    from service.batch.runner import run_batch

    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                      dashboard_address="127.0.0.1:0", scheduler_port=0) as cluster, \
            Client(cluster, set_as_default=False) as client:
        client.wait_for_workers(workers, timeout=120)
        run_batch(client, groups[: 2 * workers], spec, chunk_size=1, timeout_s=600)  # warm-up
        t0 = time.perf_counter()
        out = run_batch(client, groups, spec, timeout_s=24 * 3600)
        seconds = time.perf_counter() - t0
        rss = list(client.run(_maxrss_mib).values())
    failed = sum(not o.ok for o in out)
    return {"workers": workers, "seconds": seconds, "per_s": len(groups) / seconds,
            "rss_max": max(rss), "rss_mean": float(np.mean(rss)), "failed": failed}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--groups", type=int, default=2000)
    parser.add_argument("--workers", default="1,2", help="worker counts, comma-separated")
    parser.add_argument("--out", default=str(HERE / "results" / "batch.md"))
    args = parser.parse_args(argv)

    from service.batch.table import Columns, split_groups
    from service.batch.worker import ForecastSpec

    groups = split_groups(long_table(args.groups), Columns(("warehouse", "family"))).groups
    spec = ForecastSpec({"lags": P, **FIXED_CONFIG}, H, DRAWS, (0.05, 0.5, 0.95), seed=1,
                        blas_threads=1)
    rows = [measure(groups, spec, int(w)) for w in args.workers.split(",")]
    base = rows[0]["per_s"]
    import dask
    import distributed

    lines = [
        "# Batch forecasting throughput (tests/benchmarks/run_batch_benchmark.py)",
        "",
        f"{len(groups)} groups: n={N} series, VAR({P}), T={T}, {DRAWS} draws, h={H}; "
        "LocalCluster worker processes with 1 thread and 1 BLAS thread each; chunk size "
        "automatic (about 4 tasks per worker, at most 50 groups); warm-up outside the timing.",
        "",
        "| workers | seconds | groups/s | scaling vs first row | peak RSS per worker, max (MiB) "
        "| mean (MiB) | failed groups |",
        "|---:|---:|---:|---:|---:|---:|---:|",
        *(f"| {r['workers']} | {r['seconds']:.1f} | {r['per_s']:.1f} | "
          f"{r['per_s'] / base:.2f}x | {r['rss_max']:.0f} | {r['rss_mean']:.0f} | "
          f"{r['failed']} |" for r in rows),
        "",
        "- target: >= 1.7x from 1 to 2 workers on 2 cores (full size, quiet machine)",
        f"- machine: {platform.machine()} {cpu_model()}; nproc {os.cpu_count()}; load "
        f"average at the end {', '.join(f'{x:.2f}' for x in os.getloadavg())}",
        f"- python {platform.python_version()}, numpy {np.__version__}, dask "
        f"{dask.__version__}, distributed {distributed.__version__}; commit "
        f"{repo_commit('priors', 'service')}",
        "",
    ]
    write_report("\n".join(lines), args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
