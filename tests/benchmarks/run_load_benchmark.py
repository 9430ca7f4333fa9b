"""Load against a real server with 2 workers on SQLite (not a pytest module; loopback).

Usage::

    python tests/benchmarks/run_load_benchmark.py [--seconds 20]
        [--out tests/benchmarks/results/load.md]

Three workloads, bounded in time, one asyncio client process:

(a) dashboards: 50 clients poll a stored model's fan-chart data once a second with
    If-None-Match (the first request of each has no ETag): share of 304s, p50/p95/p99;
(b) forecasts: 8 clients post the one-shot forecast of scenario S (run_service_benchmark:
    n=3, p=4, T=120, 1000 draws, h=12) back to back: requests per second, p50/p95/p99,
    error share;
(c) overload: requests fired on a fixed schedule at twice the rate (b) achieved, for
    ``--seconds`` / 2, with the per-tenant rate limit on (its defaults): the status codes
    seen (only 200, 429 and 503 allowed, each 429/503 with Retry-After), then the time
    until a single forecast answers within twice (b)'s p50 again.

Targets on 2 cores (issue): (a) p99 < 50 ms and > 95% 304s; (b) no errors and p99 <
500 ms; (c) no other 5xx and recovery within 10 s. The client shares the machine's two
cores with the server, so latencies include that contention.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

import httpx

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parents[1]))

from run_benchmarks import cpu_model, repo_commit  # noqa: E402
from run_service_benchmark import (  # noqa: E402
    build_request,
    free_port,
    start_server,
    stop_server,
)

DEMO = HERE.parents[1] / "examples" / "bike_parts_demand.csv"


def _pct(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, int(q * len(ordered)))] if ordered else float("nan")


def _ms(values: list[float]) -> str:
    return " / ".join(f"{1000 * _pct(values, q):.1f}" for q in (0.5, 0.95, 0.99))


async def dashboards(base: str, model_id: str, seconds: float, clients: int = 50) -> dict:
    url = f"{base}/v1/models/{model_id}/fan-chart"
    latencies, statuses = [], Counter()
    stop = time.monotonic() + seconds

    async def one(client: httpx.AsyncClient, offset: float) -> None:
        await asyncio.sleep(offset)
        etag = None
        while time.monotonic() < stop:
            started = time.perf_counter()
            answer = await client.get(url, headers={"If-None-Match": etag} if etag else {})
            latencies.append(time.perf_counter() - started)
            statuses[answer.status_code] += 1
            etag = answer.headers.get("etag", etag)
            await asyncio.sleep(max(0.0, 1.0 - (time.perf_counter() - started)))

    limits = httpx.Limits(max_connections=clients)
    async with httpx.AsyncClient(timeout=60, limits=limits) as client:
        await asyncio.gather(*(one(client, i / clients) for i in range(clients)))
    total = sum(statuses.values())
    return {"requests": total, "share_304": statuses[304] / total, "statuses": dict(statuses),
            "p50_95_99_ms": _ms(latencies)}


async def forecasts(base: str, body: bytes, seconds: float, clients: int = 8) -> dict:
    latencies, statuses = [], Counter()
    stop = time.monotonic() + seconds
    headers = {"content-type": "application/json"}

    async def one(client: httpx.AsyncClient) -> None:
        while time.monotonic() < stop:
            started = time.perf_counter()
            answer = await client.post(f"{base}/v1/forecasts", content=body, headers=headers)
            latencies.append(time.perf_counter() - started)
            statuses[answer.status_code] += 1

    started = time.monotonic()
    async with httpx.AsyncClient(timeout=60, limits=httpx.Limits(max_connections=clients)) as c:
        await asyncio.gather(*(one(c) for _ in range(clients)))
    elapsed = time.monotonic() - started
    total = sum(statuses.values())
    return {"requests": total, "per_second": total / elapsed,
            "error_share": 1 - statuses[200] / total, "statuses": dict(statuses),
            "p50_95_99_ms": _ms(latencies), "p50_s": _pct(latencies, 0.5)}


async def overload(base: str, body: bytes, rate: float, seconds: float, p50: float) -> dict:
    statuses, missing_retry, failures = Counter(), 0, Counter()
    headers = {"content-type": "application/json"}

    async def one(client: httpx.AsyncClient) -> None:
        nonlocal missing_retry
        try:
            answer = await client.post(f"{base}/v1/forecasts", content=body, headers=headers)
        except httpx.HTTPError as exc:
            failures[type(exc).__name__] += 1
            return
        statuses[answer.status_code] += 1
        if answer.status_code in (429, 503) and "retry-after" not in answer.headers:
            missing_retry += 1

    async with httpx.AsyncClient(timeout=60, limits=httpx.Limits(max_connections=500)) as c:
        tasks, start = [], time.monotonic()
        for i in range(int(rate * seconds)):  # open loop: on schedule, whatever happens
            await asyncio.sleep(max(0.0, start + i / rate - time.monotonic()))
            tasks.append(asyncio.create_task(one(c)))
        await asyncio.gather(*tasks)
        ended = time.monotonic()
        recovered = None
        while time.monotonic() - ended < 60:
            t = time.perf_counter()
            answer = await c.post(f"{base}/v1/forecasts", content=body, headers=headers)
            if answer.status_code == 200 and time.perf_counter() - t <= 2 * p50:
                recovered = time.monotonic() - ended
                break
            await asyncio.sleep(0.2)
    other_5xx = sum(n for s, n in statuses.items() if s >= 500 and s != 503)
    return {"sent": int(rate * seconds), "rate": rate, "statuses": dict(statuses),
            "other_5xx": other_5xx, "missing_retry_after": missing_retry,
            "client_errors": dict(failures), "recovery_s": recovered}


def _serve(tmp: Path, env_extra: dict[str, str]) -> tuple[str, object]:
    port = free_port()
    env = {**os.environ, "FANFOLD_DATABASE_URL": f"sqlite:///{tmp / 'load.db'}",
           "FANFOLD_BLAS_THREADS": "1", **env_extra}
    procs: list = []
    proc = start_server([sys.executable, "-m", "service", "serve", "--port", str(port),
                         "--workers", "2"], port, tmp / "load.log", env, procs)
    return f"http://127.0.0.1:{port}", proc


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=20.0)
    parser.add_argument("--out", type=Path)
    args = parser.parse_args(argv)
    body = json.dumps(build_request()).encode()
    demo_rows = DEMO.read_text().splitlines()
    with tempfile.TemporaryDirectory() as tmpdir:
        tmp = Path(tmpdir)
        base, proc = _serve(tmp, {"FANFOLD_RATE_LIMIT_PER_MINUTE": "0"})
        try:
            frame = [r.split(",") for r in demo_rows[1:97]]  # 8 years of the demo data
            names = demo_rows[0].split(",")[1:]
            spec = {"series": {n: [float(r[i + 1]) for r in frame]
                               for i, n in enumerate(names)},
                    "dates": [r[0] for r in frame]}
            model_id = httpx.post(f"{base}/v1/models", json=spec, timeout=60).json()["id"]
            a = asyncio.run(dashboards(base, model_id, args.seconds))
            b = asyncio.run(forecasts(base, body, args.seconds))
        finally:
            stop_server(proc)
        base, proc = _serve(tmp, {})  # the default per-tenant rate limit
        try:
            c = asyncio.run(overload(base, body, 2 * b["per_second"], args.seconds / 2,
                                     b["p50_s"]))
        finally:
            stop_server(proc)
    lines = [
        "# Load against a real server (2 workers, SQLite, loopback)", "",
        f"commit {repo_commit()}, {cpu_model()}, {os.cpu_count()} cores; client and server "
        f"share the machine; {args.seconds:g} s per workload",
        "",
        "| workload | requests | result | p50 / p95 / p99 ms | target |",
        "|---|---|---|---|---|",
        f"| (a) 50 dashboards, fan chart with If-None-Match each second | {a['requests']} | "
        f"{100 * a['share_304']:.1f}% 304, statuses {a['statuses']} | {a['p50_95_99_ms']} | "
        "p99 < 50 ms, > 95% 304 |",
        f"| (b) 8 clients, one-shot forecast S | {b['requests']} | {b['per_second']:.1f} "
        f"req/s, errors {100 * b['error_share']:.2f}%, statuses {b['statuses']} | "
        f"{b['p50_95_99_ms']} | no errors, p99 < 500 ms |",
        f"| (c) overload at {c['rate']:.1f} req/s (2x (b)) | {c['sent']} | statuses "
        f"{c['statuses']}, other 5xx {c['other_5xx']}, 429/503 without Retry-After "
        f"{c['missing_retry_after']}, client errors {c['client_errors']}; recovered in "
        f"{c['recovery_s'] if c['recovery_s'] is None else round(c['recovery_s'], 2)} s | "
        "- | no other 5xx, recovery < 10 s |",
    ]
    text = "\n".join(lines) + "\n"
    print(text)
    if args.out:
        args.out.write_text(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
