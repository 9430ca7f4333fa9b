"""Fanfold HTTP service latency vs a bare FastAPI "floor" (not a pytest module).

Usage::

    python tests/benchmarks/run_service_benchmark.py [--requests 400] [--concurrency 8]
        [--rounds 4] [--workers 1] [--out tests/benchmarks/results/service.md]

Workload: scenario S of run_benchmarks.py (n=3 series, p=4 lags, T=120 monthly values,
simulated from a known stationary VAR with a fixed seed) sent as JSON to
``POST /v1/forecasts`` with horizon 12, lags 4, 1000 draws, seed 1 and quantiles
0.05/0.5/0.95 (the tightness is tuned: the request leaves it at "auto").

Two servers run in subprocesses on free 127.0.0.1 ports, with the same uvicorn settings
and worker count:

- Fanfold: ``python -m service serve --port P`` with ``FANFOLD_BLAS_THREADS=1`` and the
  per-tenant rate limit off (``FANFOLD_RATE_LIMIT_PER_MINUTE=0``);
- the floor: a bare FastAPI app whose one POST endpoint reads the body and returns the
  bytes of Fanfold's answer to this request (fetched once, before the runs), i.e. the
  cost of HTTP + ASGI + FastAPI routing + moving the same bytes, with no work.

Each target gets 20 warm-up requests, then ``--requests`` timed requests from
``--concurrency`` client threads sharing one httpx connection pool (the body is encoded
once; latency = time.perf_counter around ``client.post``; every answer is checked against
the reference bytes), and again with one client (sequential). The timed requests run in
``--rounds`` chunks that alternate the targets (A B, B A, ...), so that load from other
work on a shared machine falls on both. Fanfold gets a temporary SQLite database.

The engine's own compute time is measured in this process while no traffic flows:
``service.compute.engine.run_forecast(spec, frame_from_spec(spec))`` (the data frame, fit,
forecast and the answer dict: what the server does after parsing the body, and the span
its forecast histogram times) on the parsed request, 10 runs after each round of a run (between the
HTTP chunks, so in the same minutes as the traffic: these machines change speed by up to
2x within minutes), plus 10 runs before the servers start and 10 after they stop. The
bound of a run uses the median of the runs between its rounds.

Target: Fanfold p50 < 3 x floor p50 + engine median. With concurrent clients and one
worker process on a 2-core machine, the p50 includes queueing behind the other clients'
requests (the engine runs in the worker's thread pool and holds the GIL for much of its
time), and the client threads compete with the server for the same cores, so the bound is
checked for the concurrent and for the sequential run, labelled as such.

All traffic goes to 127.0.0.1. Every wait is bounded; both servers are stopped at the end
(SIGTERM, then SIGKILL to their process group after 25 s), also on errors. A failed run
writes its traceback and the last lines of both servers' logs to ``<out>.failure.log``.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import os
import platform
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import httpx
import numpy as np
from fastapi import FastAPI, Request, Response
from run_benchmarks import SCENARIOS, cpu_model, repo_commit, simulate_var, write_report

HERE = Path(__file__).resolve().parent
REPO = HERE.parent.parent

SCENARIO = "S"
REQUEST_SETTINGS: dict[str, Any] = {
    "start": "2016-01-01", "frequency": "MS", "horizon": 12, "lags": 4, "draws": 1000,
    "seed": 1, "quantiles": [0.05, 0.5, 0.95],
    # the workload of the latency target: the configuration from before the automatic one
    "transforms": None, "seasonal": False, "sum_coef": None, "initial": None,
    "hyperprior": False,
}
PATH = "/v1/forecasts"
WARMUP = 20
ENGINE_REPEATS = 10
FLOOR_FACTOR = 3.0
READY_TIMEOUT_S = 60.0
STOP_TIMEOUT_S = 25.0
REQUEST_TIMEOUT_S = 60.0
MAX_ERRORS = 20  # a run stops early after this many failed requests
FLOOR_BODY_ENV = "FANFOLD_BENCH_FLOOR_BODY"


# ---------------------------------------------------------------------------- request
def build_request() -> dict[str, Any]:
    """The JSON body: scenario S data on monthly dates from 2016-01-01."""
    n, p, T = SCENARIOS[SCENARIO]
    Y = simulate_var(n, p, T)
    series = {f"s{j + 1}": [float(v) for v in Y[:, j]] for j in range(n)}
    return {"series": series, **REQUEST_SETTINGS}


# ---------------------------------------------------------------------------- floor app
def floor_app_factory() -> FastAPI:
    """The floor: read the body, answer with precomputed bytes (uvicorn factory)."""
    answer = Path(os.environ[FLOOR_BODY_ENV]).read_bytes()
    app = FastAPI(docs_url=None, redoc_url=None, openapi_url=None)

    @app.get("/readyz")
    def readyz() -> Response:
        return Response(b'{"status":"ready"}', media_type="application/json")

    @app.post(PATH)
    async def forecast(request: Request) -> Response:
        await request.body()
        return Response(answer, media_type="application/json")

    return app


def serve_floor(port: int, workers: int) -> int:
    """Run the floor app with the uvicorn settings of ``fanfold serve``."""
    import uvicorn

    from service.http_protocol import NoDelayHTTPProtocol

    uvicorn.run(f"{Path(__file__).stem}:floor_app_factory", factory=True, app_dir=str(HERE),
                host="127.0.0.1", port=port, workers=workers, log_level="warning",
                timeout_graceful_shutdown=20, http=NoDelayHTTPProtocol)
    return 0


# ---------------------------------------------------------------------------- servers
def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _tail(log: Path, lines: int = 20) -> str:
    try:
        return "\n".join(log.read_text(errors="replace").splitlines()[-lines:])
    except OSError:
        return "(no log)"


def start_server(cmd: list[str], port: int, log: Path, env: dict[str, str],
                 procs: list[subprocess.Popen]) -> subprocess.Popen:
    """Start ``cmd`` (appended to ``procs`` at once, for cleanup) and wait for /readyz."""
    with log.open("ab") as err:
        proc = subprocess.Popen(cmd, cwd=REPO, env=env, stdout=subprocess.DEVNULL,
                                stderr=err, start_new_session=True)
    procs.append(proc)
    deadline = time.monotonic() + READY_TIMEOUT_S
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"server exited with {proc.returncode}:\n{_tail(log)}")
        try:
            if httpx.get(f"http://127.0.0.1:{port}/readyz", timeout=1).status_code == 200:
                return proc
        except httpx.HTTPError:
            pass
        time.sleep(0.2)
    raise RuntimeError(f"server not ready within {READY_TIMEOUT_S:g} s:\n{_tail(log)}")


def stop_server(proc: subprocess.Popen) -> int | None:
    """SIGTERM (uvicorn drains), then SIGKILL the process group after 25 s."""
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(timeout=STOP_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            pass
    if proc.poll() is None:
        try:
            os.killpg(proc.pid, signal.SIGKILL)  # the group started for this server only
        except ProcessLookupError:
            pass
        try:
            proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            return None
    return proc.returncode


def server_cpu_seconds(pid: int) -> float | None:
    """utime + stime of ``pid`` and its direct children (uvicorn workers), Linux only."""
    tick = os.sysconf("SC_CLK_TCK")

    def stat(path: Path) -> tuple[int, float] | None:
        try:
            fields = path.read_text().rsplit(")", 1)[1].split()
        except (OSError, IndexError):
            return None
        return int(fields[1]), (int(fields[11]) + int(fields[12])) / tick  # ppid, cpu

    own = stat(Path(f"/proc/{pid}/stat"))
    if own is None:
        return None
    total = own[1]
    for path in Path("/proc").glob("[0-9]*/stat"):
        other = stat(path)
        if other is not None and other[0] == pid:
            total += other[1]
    return total


def scrape_metrics(base: str) -> dict[str, float]:
    """Sums and counts of Fanfold's request and engine-duration histograms."""
    wanted = {
        'fanfold_http_request_duration_seconds_sum{method="POST",route="/v1/forecasts"}':
            "http_sum",
        'fanfold_http_request_duration_seconds_count{method="POST",route="/v1/forecasts"}':
            "http_count",
        "fanfold_forecast_duration_seconds_sum": "engine_sum",
        "fanfold_forecast_duration_seconds_count": "engine_count",
    }
    out: dict[str, float] = {}
    try:
        text = httpx.get(f"{base}/metrics", timeout=5).text
    except httpx.HTTPError:
        return out
    for line in text.splitlines():
        key, _, value = line.rpartition(" ")
        if key in wanted:
            out[wanted[key]] = float(value)
    return out


# ---------------------------------------------------------------------------- load
def run_load(url: str, body: bytes, total: int, concurrency: int,
             expected: bytes | None) -> dict[str, Any]:
    """``total`` POSTs from ``concurrency`` threads; latencies in seconds."""
    latencies: list[float] = []
    errors: list[str] = []
    lock = threading.Lock()
    issued = 0
    headers = {"content-type": "application/json"}
    limits = httpx.Limits(max_connections=concurrency, max_keepalive_connections=concurrency)

    def next_slot() -> bool:
        nonlocal issued
        with lock:
            if issued >= total or len(errors) >= MAX_ERRORS:
                return False
            issued += 1
            return True

    def worker(client: httpx.Client) -> None:
        while next_slot():
            t0 = time.perf_counter()
            try:
                r = client.post(url, content=body, headers=headers)
                elapsed = time.perf_counter() - t0
            except httpx.HTTPError as exc:
                with lock:
                    errors.append(f"{type(exc).__name__}: {exc}"[:120])
                continue
            if r.status_code != 200:
                with lock:
                    errors.append(f"HTTP {r.status_code}: {r.text[:80]}")
            elif expected is not None and r.content != expected:
                with lock:
                    errors.append("answer differs from the reference answer")
            else:
                latencies.append(elapsed)

    with httpx.Client(limits=limits, timeout=REQUEST_TIMEOUT_S) as client:
        threads = [threading.Thread(target=worker, args=(client,), daemon=True)
                   for _ in range(concurrency)]
        wall0 = time.perf_counter()
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=REQUEST_TIMEOUT_S * (total + 1))
        wall = time.perf_counter() - wall0
    return {"latencies": latencies, "errors": errors, "wall": wall,
            "hung": sum(t.is_alive() for t in threads)}


@dataclass
class Target:
    name: str
    base: str
    pid: int
    expected: bytes | None
    metrics: bool  # scrape Fanfold's /metrics around the timed chunks


@dataclass
class _Totals:
    latencies: list[float] = field(default_factory=list)
    errors: list[str] = field(default_factory=list)
    wall: float = 0.0
    cpu: float | None = 0.0
    hung: int = 0
    sums: dict[str, float] = field(default_factory=dict)


def _chunk(target: Target, body: bytes, size: int, concurrency: int, acc: _Totals) -> None:
    before = scrape_metrics(target.base) if target.metrics else {}
    cpu0 = server_cpu_seconds(target.pid)
    res = run_load(f"{target.base}{PATH}", body, size, concurrency, target.expected)
    cpu1 = server_cpu_seconds(target.pid)
    after = scrape_metrics(target.base) if target.metrics else {}
    acc.latencies += res["latencies"]
    acc.errors += res["errors"]
    acc.wall += res["wall"]
    acc.hung += res["hung"]
    if acc.cpu is not None and cpu0 is not None and cpu1 is not None:
        acc.cpu += cpu1 - cpu0
    else:
        acc.cpu = None
    for key, value in after.items():
        acc.sums[key] = acc.sums.get(key, 0.0) + value - before.get(key, 0.0)


def measure_run(targets: list[Target], body: bytes, total: int, concurrency: int,
                rounds: int, engine_probe: Callable[[], list[float]] | None = None
                ) -> list[dict[str, Any]]:
    """Warm up every target, then ``total`` requests each in ``rounds`` interleaved chunks.

    The order alternates (A B, B A, ...) so that slow drifts of a shared machine's load
    fall on both targets alike. ``engine_probe`` (in-process engine times, s) runs after
    every round while no traffic flows, so the bound uses the engine's speed of the same
    minutes (these machines change speed by up to 2x within minutes).
    """
    during: list[float] = []
    for t in targets:
        warm = run_load(f"{t.base}{PATH}", body, WARMUP, concurrency, t.expected)
        if warm["errors"]:
            raise RuntimeError(f"{t.name}: warm-up failed: {warm['errors'][0]}")
    sizes = [total // rounds + (i < total % rounds) for i in range(rounds)]
    acc = {t.name: _Totals() for t in targets}
    for i, size in enumerate(s for s in sizes if s):
        for t in targets if i % 2 == 0 else targets[::-1]:
            _chunk(t, body, size, concurrency, acc[t.name])
            if len(acc[t.name].errors) >= MAX_ERRORS:
                raise RuntimeError(f"{t.name}: {len(acc[t.name].errors)} failed requests, "
                                   f"first: {acc[t.name].errors[0]}")
        if engine_probe is not None:
            during += engine_probe()
    out = []
    for t in targets:
        a = acc[t.name]
        lat = np.asarray(a.latencies) * 1e3
        done = lat.size
        p50, p95, p99 = np.percentile(lat, [50, 95, 99]) if done else (np.nan,) * 3
        r: dict[str, Any] = {
            "target": t.name, "concurrency": concurrency, "requests": total, "ok": done,
            "errors": len(a.errors), "first_error": (a.errors or [""])[0], "hung": a.hung,
            "p50": float(p50), "p95": float(p95), "p99": float(p99),
            "mean": float(lat.mean()) if done else float("nan"),
            "rps": done / a.wall if a.wall > 0 else float("nan"),
            "cpu_ms": a.cpu * 1e3 / done if done and a.cpu is not None else None,
            "load": os.getloadavg()[0], "engine_during": during}
        for kind in ("http", "engine"):
            count = a.sums.get(f"{kind}_count", 0.0)
            if count > 0:
                r[f"server_{kind}_ms"] = a.sums[f"{kind}_sum"] / count * 1e3
        out.append(r)
    return out


# ---------------------------------------------------------------------------- engine
def _repeat(fn: Callable[[], object], repeats: int) -> list[float]:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return times


def measure_engine(body: bytes, repeats: int) -> dict[str, list[float]]:
    """In-process times (s) of the route's pieces; run_forecast is the engine."""
    import warnings

    from service.compute.engine import frame_from_spec, run_forecast
    from service.config import Settings
    from service.responses import JSONResponse
    from service.schemas import ForecastCreate

    spec = ForecastCreate.model_validate_json(body)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        payload = run_forecast(spec, frame_from_spec(spec), Settings(blas_threads=1))
    out = {"engine": engine_probe(body, repeats)()}  # after the warm-up above
    out["parse"] = _repeat(lambda: ForecastCreate.model_validate_json(body), repeats)
    out["frame"] = _repeat(lambda: frame_from_spec(spec), repeats)
    out["render"] = _repeat(lambda: JSONResponse(payload), repeats)
    return out


def engine_probe(body: bytes, repeats: int) -> Callable[[], list[float]]:
    """A function timing ``repeats`` in-process engine runs (s) of this request: the data
    frame from the parsed request, fit, forecast and answer dict, i.e. the span the
    server's forecast histogram times (everything after the body is parsed)."""
    import warnings

    from service.compute.engine import frame_from_spec, run_forecast
    from service.config import Settings
    from service.schemas import ForecastCreate

    settings = Settings(blas_threads=1)
    spec = ForecastCreate.model_validate_json(body)

    def probe() -> list[float]:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return _repeat(lambda: run_forecast(spec, frame_from_spec(spec), settings),
                           repeats)

    return probe


# ---------------------------------------------------------------------------- report
def machine_info() -> list[str]:
    import fastapi
    import pydantic
    import starlette
    import uvicorn

    cpu, commit = cpu_model(), repo_commit("service", "priors")

    def have(module: str) -> str:
        import importlib.util

        return "yes" if importlib.util.find_spec(module) is not None else "no"

    return [
        f"- date: {_dt.datetime.now().isoformat(timespec='seconds')}; repo commit {commit}",
        f"- machine: {platform.machine()} {cpu}; nproc {os.cpu_count()}; load average at "
        f"start {os.getloadavg()[0]:.2f}",
        f"- python {platform.python_version()}, numpy {np.__version__}, fastapi "
        f"{fastapi.__version__}, starlette {starlette.__version__}, uvicorn "
        f"{uvicorn.__version__}, pydantic {pydantic.__version__}, httpx {httpx.__version__}",
        f"- uvicorn extras: uvloop {have('uvloop')}, httptools {have('httptools')} "
        "(without them: asyncio loop and h11)",
    ]


def _ms(x: float | None, digits: int = 2) -> str:
    return "n/a" if x is None or not np.isfinite(x) else f"{x:.{digits}f}"


def build_report(header: list[str], settings: list[str], runs: list[dict[str, Any]],
                 engine: list[dict[str, list[float]]], body_len: int, answer_len: int,
                 workers: int) -> str:
    """``engine``: the in-process times before and after the HTTP runs."""
    engine_median = statistics.median([x for e in engine for x in e["engine"]]) * 1e3
    out = ["# Fanfold service benchmark", "", *header, *settings,
           f"- request body {body_len} bytes; answer {answer_len} bytes (the floor returns "
           "the same bytes)", ""]
    out += ["## Latency (client side, ms)", "",
            "| run | target | clients | requests ok / errors | p50 | p95 | p99 | mean | "
            "req/s | server CPU ms/req | in-app ms (mean) | engine ms in server (mean) | "
            "load avg |",
            "|---|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in runs:
        label = "sequential" if r["concurrency"] == 1 else "concurrent"
        hung = f" ({r['hung']} threads hung)" if r["hung"] else ""
        out.append(
            f"| {label} | {r['target']} | {r['concurrency']} | {r['ok']} / {r['errors']}"
            f"{hung} | "
            f"{_ms(r['p50'])} | {_ms(r['p95'])} | {_ms(r['p99'])} | {_ms(r['mean'])} | "
            f"{_ms(r['rps'], 1)} | {_ms(r['cpu_ms'])} | {_ms(r.get('server_http_ms'))} | "
            f"{_ms(r.get('server_engine_ms'))} | {r['load']:.2f} |")
    out += ["", f"## Target: Fanfold p50 < {FLOOR_FACTOR:g} x floor p50 + engine median", "",
            "The engine median is that of the in-process runs between this run's rounds "
            "(the same minutes as the traffic); the one of the runs before and after all "
            "traffic is beside it.", "",
            "| run | clients | floor p50 | engine median (during; before/after) | bound | "
            "Fanfold p50 | Fanfold p50 / bound | result |",
            "|---|---|---|---|---|---|---|---|"]
    verdicts = []
    for conc in dict.fromkeys(r["concurrency"] for r in runs):
        by = {r["target"]: r for r in runs if r["concurrency"] == conc}
        ff, fl = by["fanfold"], by["floor"]
        during = ff.get("engine_during") or []
        engine_now = statistics.median(during) * 1e3 if during else engine_median
        bound = FLOOR_FACTOR * fl["p50"] + engine_now
        ok = ff["errors"] == 0 and fl["errors"] == 0 and ff["p50"] < bound
        label = "sequential" if conc == 1 else "concurrent (includes queueing)"
        verdicts.append(f"{label}: {'PASS' if ok else 'FAIL'}")
        out.append(f"| {label} | {conc} | {_ms(fl['p50'])} | {_ms(engine_now)} "
                   f"({len(during)} runs; {_ms(engine_median)}) | "
                   f"{_ms(bound)} | {_ms(ff['p50'])} | {ff['p50'] / bound:.2f} | "
                   f"{'PASS' if ok else 'FAIL'} |")
    names = {"engine": "run_forecast(spec, frame_from_spec(spec)): frame + fit + forecast "
                       "+ answer dict (the engine)",
             "parse": "ForecastCreate.model_validate_json(body)",
             "frame": "frame_from_spec(spec)",
             "render": "service.responses.JSONResponse(payload) (pydantic-core)"}
    out += ["", f"## In-process times, one BLAS thread (ms, {ENGINE_REPEATS} runs after one "
            "warm-up, before the servers start and after they stop)", "",
            "| piece | best before | median before | best after | median after |",
            "|---|---|---|---|---|"]
    for key, text in names.items():
        cells = " | ".join(f"{f(e[key]) * 1e3:.3f}" for e in engine
                           for f in (min, statistics.median))
        out.append(f"| {text} | {cells} |")
    out.append(f"| engine median of all {sum(len(e['engine']) for e in engine)} runs "
               f"before and after | {engine_median:.3f} | | | |")
    total_med = sum(statistics.median([x for e in engine for x in e[k]]) * 1e3
                    for k in names if k != "frame")
    out += ["", f"Verdict: {'; '.join(verdicts)}.", "", "Notes:", "",
            f"- Sum of the in-process medians (all runs; parse + engine + render, the frame "
            f"being part of the engine): {total_med:.2f} ms.",
            "- 'server CPU ms/req' is the server process's user+system CPU time "
            "(/proc/PID/stat, with its worker children) over the timed run divided by the "
            "requests; it includes the engine's BLAS thread(s).",
            "- 'in-app ms' and 'engine ms in server' are means from Fanfold's /metrics "
            "histograms over the timed run: the request inside the ASGI app (after uvicorn "
            "parsed it) and the engine call including the hop to the thread pool.",
            "- 'load avg' is the 1-minute load average after the run (this benchmark's own "
            "client and server count too; on a 2-core machine values well above 2 mean "
            "other work was competing).",
            "- The client threads run in this process on the same cores as the server; the "
            "same client runs against both targets, so its cost is in the floor too.",
            "- The concurrent p50 contains queueing: with one worker process the requests "
            "in flight share one GIL, so a request waits for the compute of the others.",
            f"- load average at end: {os.getloadavg()[0]:.2f}", ""]
    if workers > 1:
        out[-1:] = ["- workers > 1: both servers use service.http_protocol.NoDelayHTTPProtocol"
                    ", which sets TCP_NODELAY on each accepted connection (uvicorn's "
                    "multiprocess supervisor binds the socket with proto 0, so asyncio does "
                    "not: Kludex/uvicorn#3149; without it each keep-alive request waits "
                    "~40 ms for the client's delayed ACK).",
                    f"- load average at end: {os.getloadavg()[0]:.2f}", ""]
    return "\n".join(out)


# ---------------------------------------------------------------------------- main
def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--requests", type=int, default=400,
                    help="timed requests per target and run (after 20 warm-up requests)")
    ap.add_argument("--concurrency", type=int, default=8, help="concurrent client threads")
    ap.add_argument("--rounds", type=int, default=4,
                    help="interleaved chunks per target and run (A B, B A, ...)")
    ap.add_argument("--workers", type=int, default=1,
                    help="uvicorn worker processes of both servers (fanfold serve default: 1)")
    ap.add_argument("--out", default=str(HERE / "results" / "service.md"))
    ap.add_argument("--floor-server", type=int, metavar="PORT", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if min(args.requests, args.concurrency, args.workers, args.rounds) < 1:
        ap.error("--requests, --concurrency, --workers and --rounds must be >= 1")
    if args.floor_server:
        return serve_floor(args.floor_server, args.workers)

    sys.path.insert(0, str(REPO))  # this checkout's service/ and priors/
    request = build_request()
    body = json.dumps(request).encode()
    header = machine_info()
    print("measuring the engine in-process ...", file=sys.stderr, flush=True)
    engine = [measure_engine(body, ENGINE_REPEATS)]
    concurrencies = list(dict.fromkeys([args.concurrency, 1]))
    settings = [
        f"- scenario {SCENARIO} (n, p, T = {SCENARIOS[SCENARIO]}), request settings "
        f"{json.dumps(REQUEST_SETTINGS)}",
        f"- {args.requests} timed requests per target and run after {WARMUP} warm-up "
        f"requests, in {args.rounds} rounds alternating the targets; runs with "
        f"{' and '.join(map(str, concurrencies))} client thread(s) (one shared httpx pool); "
        "uvicorn workers per server: "
        f"{args.workers}; FANFOLD_BLAS_THREADS=1; FANFOLD_RATE_LIMIT_PER_MINUTE=0 (off); "
        "FANFOLD_DATABASE_URL: a temporary SQLite file",
    ]

    runs: list[dict[str, Any]] = []
    procs: list[subprocess.Popen] = []
    with tempfile.TemporaryDirectory(prefix="fanfold-bench-") as tmp:
        tmpdir = Path(tmp)
        # the service opens its database at start-up: keep it out of the checkout
        # the per-tenant rate limit (600/min by default) is off: this measures latency
        env = {**os.environ, "FANFOLD_BLAS_THREADS": "1", "FANFOLD_RATE_LIMIT_PER_MINUTE": "0",
               "FANFOLD_DATABASE_URL": f"sqlite:///{tmpdir / 'fanfold.db'}"}
        try:
            ff_port = free_port()
            ff_base = f"http://127.0.0.1:{ff_port}"
            print(f"starting fanfold on {ff_base} ...", file=sys.stderr, flush=True)
            ff = start_server([sys.executable, "-m", "service", "serve", "--port",
                               str(ff_port), "--workers", str(args.workers)],
                              ff_port, tmpdir / "fanfold.log", env, procs)
            first = httpx.post(f"{ff_base}{PATH}", content=body, timeout=REQUEST_TIMEOUT_S,
                               headers={"content-type": "application/json"})
            if first.status_code != 200:
                raise RuntimeError(f"fanfold answered {first.status_code}: {first.text[:200]}")
            answer = first.content
            (tmpdir / "answer.json").write_bytes(answer)

            fl_port = free_port()
            fl_base = f"http://127.0.0.1:{fl_port}"
            print(f"starting the floor on {fl_base} ...", file=sys.stderr, flush=True)
            fl = start_server([sys.executable, str(Path(__file__).resolve()),
                               "--floor-server", str(fl_port), "--workers", str(args.workers)],
                              fl_port, tmpdir / "floor.log",
                              {**env, FLOOR_BODY_ENV: str(tmpdir / "answer.json")}, procs)
            targets = [Target("fanfold", ff_base, ff.pid, answer, True),
                       Target("floor", fl_base, fl.pid, answer, False)]
            for conc in concurrencies:
                print(f"{args.requests} requests per target in {args.rounds} interleaved "
                      f"rounds, {conc} client(s) ...", file=sys.stderr, flush=True)
                runs += measure_run(targets, body, args.requests, conc, args.rounds,
                                    engine_probe(body, ENGINE_REPEATS))
        except Exception:
            # what went wrong and what the servers said, on stderr and in a file next to
            # --out (runs are often started with their output thrown away)
            text = [traceback.format_exc()]
            for name in ("fanfold.log", "floor.log"):
                if (tmpdir / name).exists():
                    text.append(f"--- end of {name} ---\n{_tail(tmpdir / name, 40)}")
            failure = Path(args.out).with_suffix(".failure.log")
            failure.write_text("\n".join(text))
            print("\n".join(text[1:]) + f"\n(also in {failure})", file=sys.stderr)
            raise
        finally:
            for proc in procs:
                code = stop_server(proc)
                print(f"stopped server pid {proc.pid}: exit {code}", file=sys.stderr)

    print("measuring the engine in-process again ...", file=sys.stderr, flush=True)
    engine.append(measure_engine(body, ENGINE_REPEATS))
    write_report(build_report(header, settings, runs, engine, len(body), len(answer),
                              args.workers), args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
