"""Load against a real server with 2 workers, on SQLite and on PostgreSQL (loopback only;
not a pytest module).

Usage::

    python tests/benchmarks/run_load_benchmark.py [--database sqlite|postgres|both]
        [--seconds 60] [--out tests/benchmarks/results/load.md] [--note TEXT]

For each database a server ``fanfold serve --workers 2`` starts on a free 127.0.0.1
port with ``FANFOLD_BLAS_THREADS=1``: SQLite on a temporary file (WAL, synchronous=FULL),
PostgreSQL on a throw-away server (``tests/service/postgres.py``, fsync on, as in
production). Three workloads, each bounded in time, from one asyncio client process:

(a) dashboards: 50 clients each load a stored model's fan-chart data once (timed apart,
    "first loads"), then poll it once a second with If-None-Match for ``--seconds``:
    share of 304s and p50/p95/p99 of the polls. The model does not change meanwhile, so
    every poll should be a 304 (a 200 means the ETag differed between the workers);
(b) forecasts: 8 clients post the one-shot forecast of scenario S (run_service_benchmark:
    n=3, p=4, T=120, 1000 draws, h=12) back to back for ``--seconds``: requests per
    second, p50/p95/p99, error share (any answer but 200, or no answer);
(c) overload: a second server with the per-tenant rate limit on (its defaults) gets the
    same forecast on a fixed schedule (open loop) at twice the rate (b) achieved, for
    ``--seconds`` / 2: the status codes (only 200, 429 and 503 allowed, each 429/503 with
    Retry-After; a client timeout of 10 s or a dropped connection is a failure), then the
    recovery time: from the end of the schedule until a single forecast is answered 200
    within twice (b)'s p50 (probing every 0.2 s, at most 60 s).

(c') the same overload on the first server (rate limit off): what the load shedding
    alone (``FANFOLD_MAX_IN_FLIGHT``, 503 + Retry-After) does when many tenants together
    overload the server; judged by (c)'s criteria but not part of the verdict.

(a), (b) and (c') run with the rate limit off (one tenant would otherwise be throttled).
(b), (c) and (c') use a minimal keep-alive HTTP/1.1 client (``RawClient``): with httpx the
client process took the cores from the server and (b) measured the client.
Targets on 2 cores (issue "Evidence of reliability"): (a) p99 < 50 ms and > 95% 304s;
(b) no errors and p99 < 500 ms; (c) no other 5xx, no client failures, recovery < 10 s.

The client shares the machine's cores with the server (and here with other work), so
latencies include that contention; the load average is recorded before and after.
Every wait is bounded; servers are stopped with SIGTERM, then SIGKILL of their process
group, also on errors. With the defaults a run takes about 4 minutes per database.
"""

from __future__ import annotations

import argparse
import asyncio
import datetime as dt
import json
import os
import platform
import sys
import tempfile
import time
from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager
from importlib.metadata import version
from pathlib import Path
from typing import Any

import httpx

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(REPO))

from run_benchmarks import cpu_model, repo_commit  # noqa: E402
from run_service_benchmark import (  # noqa: E402
    build_request,
    free_port,
    start_server,
    stop_server,
)

from tests.service.postgres import (  # noqa: E402
    fresh_postgres_database,
    temporary_postgres,
)

DEMO = REPO / "examples" / "bike_parts_demand.csv"
DASHBOARDS = 50
FORECAST_CLIENTS = 8
OVERLOAD_FACTOR = 2.0
OVERLOAD_TIMEOUT_S = 10.0  # a client waiting longer counts as a failure ("no timeouts")
RECOVERY_LIMIT_S = 60.0
#: what a request of the raw client can fail with (no answer, a cut or malformed one)
CLIENT_FAILURES = (OSError, asyncio.IncompleteReadError, asyncio.LimitOverrunError,
                   TimeoutError, ValueError)
TARGETS = {"a_p99_ms": 50.0, "a_share_304": 0.95, "b_p99_ms": 500.0, "c_recovery_s": 10.0}


def _pct(values: list[float], q: float) -> float:
    """The q-quantile (nearest rank, q in (0, 1]) of ``values``; NaN when empty."""
    ordered = sorted(values)
    if not ordered:
        return float("nan")
    return ordered[min(len(ordered) - 1, max(0, int(q * len(ordered) + 0.999999) - 1))]


def _ms3(values: list[float]) -> str:
    return " / ".join(f"{1000 * _pct(values, q):.1f}" for q in (0.5, 0.95, 0.99))


# ---------------------------------------------------------------------------- workloads
async def dashboards(base: str, model_id: str, seconds: float,
                     clients: int = DASHBOARDS) -> dict[str, Any]:
    url = f"{base}/v1/models/{model_id}/fan-chart"
    first: list[float] = []
    polls: list[float] = []
    statuses: Counter[int] = Counter()
    failures: Counter[str] = Counter()
    etags: set[str] = set()

    async def one(client: httpx.AsyncClient, offset: float, stop: float) -> None:
        await asyncio.sleep(offset)
        started = time.perf_counter()
        answer = await client.get(url)  # the dashboard opens: a full load, timed apart
        first.append(time.perf_counter() - started)
        if answer.status_code != 200:
            failures[f"first load {answer.status_code}"] += 1
            return
        etag = answer.headers["etag"]
        etags.add(etag)
        await asyncio.sleep(max(0.0, 1.0 - (time.perf_counter() - started)))
        while time.monotonic() < stop:
            started = time.perf_counter()
            try:
                answer = await client.get(url, headers={"If-None-Match": etag})
            except httpx.HTTPError as exc:
                failures[type(exc).__name__] += 1
            else:
                polls.append(time.perf_counter() - started)
                statuses[answer.status_code] += 1
                etag = answer.headers.get("etag", etag)
                etags.add(etag)
            await asyncio.sleep(max(0.0, 1.0 - (time.perf_counter() - started)))

    limits = httpx.Limits(max_connections=clients, max_keepalive_connections=clients)
    async with httpx.AsyncClient(timeout=60, limits=limits) as client:
        # first loads spread over one second; the timed window starts after the slowest
        stop = time.monotonic() + 1.0 + seconds
        await asyncio.gather(*(one(client, i / clients, stop) for i in range(clients)))
    total = sum(statuses.values())
    p99 = _pct(polls, 0.99)
    share = statuses[304] / total if total else 0.0
    return {"clients": clients, "first_loads": len(first), "first_ms": _ms3(first),
            "polls": total, "share_304": share, "statuses": dict(statuses),
            "failures": dict(failures), "distinct_etags": len(etags),
            "p50_95_99_ms": _ms3(polls), "p99_ms": 1000 * p99,
            "met": (not failures and total > 0 and 1000 * p99 < TARGETS["a_p99_ms"]
                    and share > TARGETS["a_share_304"])}


async def forecasts(base: str, body: bytes, seconds: float,
                    clients: int = FORECAST_CLIENTS) -> dict[str, Any]:
    latencies: list[float] = []
    statuses: Counter[int] = Counter()
    failures: Counter[str] = Counter()
    client = RawClient(base, max_connections=clients)
    request = client.post_bytes("/v1/forecasts", body, "application/json")
    stop = time.monotonic() + seconds

    async def one() -> None:
        while time.monotonic() < stop:
            started = time.perf_counter()
            try:
                status, _ = await client.send(request, 60.0)
            except CLIENT_FAILURES as exc:
                failures[type(exc).__name__] += 1
                continue
            latencies.append(time.perf_counter() - started)
            statuses[status] += 1

    started = time.monotonic()
    await asyncio.gather(*(one() for _ in range(clients)))
    elapsed = time.monotonic() - started
    await client.close()
    total = sum(statuses.values()) + sum(failures.values())
    errors = total - statuses[200]
    p99 = _pct(latencies, 0.99)
    return {"clients": clients, "requests": total, "per_second": statuses[200] / elapsed,
            "error_share": errors / total if total else 1.0, "statuses": dict(statuses),
            "failures": dict(failures), "p50_95_99_ms": _ms3(latencies),
            "p50_s": _pct(latencies, 0.5), "p99_ms": 1000 * p99,
            "met": total > 0 and errors == 0 and 1000 * p99 < TARGETS["b_p99_ms"]}


class RawClient:
    """A minimal HTTP/1.1 keep-alive client on asyncio streams, for the overload of (c).

    httpx spends about a millisecond of CPU per request; at the rates of (c) the load
    generator then took the cores from the server and sent at half the scheduled rate.
    This client writes prepared request bytes and reads the status line, the headers and
    a Content-Length or chunked body: a fraction of the cost. At most ``max_connections``
    at once (the rest wait for one); a connection that fails or times out is dropped, and
    one idle for ``IDLE_S`` is closed instead of reused (uvicorn closes keep-alive
    connections after 5 s idle; reusing one then reads an empty answer, which a real
    client avoids the same way).
    """

    IDLE_S = 3.0

    def __init__(self, base: str, max_connections: int = 1000) -> None:
        host, _, port = base.removeprefix("http://").partition(":")
        self.host, self.port = host, int(port)
        self.idle: list[tuple[asyncio.StreamReader, asyncio.StreamWriter, float]] = []
        self.slots = asyncio.Semaphore(max_connections)
        self.opened = 0

    def post_bytes(self, path: str, body: bytes, content_type: str) -> bytes:
        return (f"POST {path} HTTP/1.1\r\nHost: {self.host}:{self.port}\r\n"
                f"Content-Type: {content_type}\r\nContent-Length: {len(body)}\r\n"
                "Connection: keep-alive\r\n\r\n").encode() + body

    async def send(self, request: bytes, timeout: float) -> tuple[int, dict[str, str]]:
        """Status and headers (lower-case names) of the answer; raises on failures."""
        async with self.slots:
            while self.idle and time.monotonic() - self.idle[-1][2] > self.IDLE_S:
                self.idle.pop()[1].close()
            while self.idle and time.monotonic() - self.idle[0][2] > self.IDLE_S:
                self.idle.pop(0)[1].close()
            if self.idle:
                reader, writer, _ = self.idle.pop()
            else:
                reader, writer = await asyncio.wait_for(
                    asyncio.open_connection(self.host, self.port), timeout)
                self.opened += 1
            try:
                status, headers = await asyncio.wait_for(
                    self._exchange(reader, writer, request), timeout)
            except BaseException:
                writer.close()
                raise
            if headers.get("connection", "").lower() == "close":
                writer.close()
            else:
                self.idle.append((reader, writer, time.monotonic()))
            return status, headers

    @staticmethod
    async def _exchange(reader: asyncio.StreamReader, writer: asyncio.StreamWriter,
                        request: bytes) -> tuple[int, dict[str, str]]:
        writer.write(request)
        await writer.drain()
        head = (await reader.readuntil(b"\r\n\r\n")).decode("latin-1").split("\r\n")
        status = int(head[0].split(" ", 2)[1])
        headers = {}
        for line in head[1:]:
            name, sep, value = line.partition(":")
            if sep:
                headers[name.strip().lower()] = value.strip()
        if headers.get("transfer-encoding", "").lower() == "chunked":
            while size := int((await reader.readuntil(b"\r\n")).split(b";")[0], 16):
                await reader.readexactly(size + 2)
            await reader.readuntil(b"\r\n")
        elif length := int(headers.get("content-length", "0")):
            await reader.readexactly(length)
        return status, headers

    async def close(self) -> None:
        for _, writer, _ in self.idle:
            writer.close()
        self.idle.clear()


async def overload(base: str, body: bytes, rate: float, seconds: float,
                   healthy_s: float) -> dict[str, Any]:
    statuses: Counter[int] = Counter()
    failures: Counter[str] = Counter()
    latencies: list[float] = []
    missing_retry = 0
    client = RawClient(base)
    request = client.post_bytes("/v1/forecasts", body, "application/json")

    async def one() -> None:
        nonlocal missing_retry
        started = time.perf_counter()
        try:
            status, headers = await client.send(request, OVERLOAD_TIMEOUT_S)
        except CLIENT_FAILURES as exc:
            failures[type(exc).__name__] += 1
            return
        latencies.append(time.perf_counter() - started)
        statuses[status] += 1
        if status in (429, 503) and "retry-after" not in headers:
            missing_retry += 1

    sent = int(rate * seconds)
    tasks, start = [], time.monotonic()
    for i in range(sent):  # open loop: on schedule, whatever the answers
        await asyncio.sleep(max(0.0, start + i / rate - time.monotonic()))
        tasks.append(asyncio.create_task(one()))
    ended = time.monotonic()  # the load stops here
    send_rate = sent / max(ended - start, 1e-9)
    recovered = None
    probes = 0
    while time.monotonic() - ended < RECOVERY_LIMIT_S:
        probes += 1
        t = time.perf_counter()
        try:
            status, _ = await client.send(request, OVERLOAD_TIMEOUT_S)
            ok = status == 200 and time.perf_counter() - t <= healthy_s
        except CLIENT_FAILURES:
            ok = False
        if ok:
            recovered = time.monotonic() - ended
            break
        await asyncio.sleep(0.2)
    await asyncio.gather(*tasks)
    drained = time.monotonic() - ended
    await client.close()
    other_5xx = sum(n for s, n in statuses.items() if s >= 500 and s != 503)
    unexpected = sum(n for s, n in statuses.items() if s not in (200, 429, 503))
    return {"rate": rate, "sent": sent, "send_rate": send_rate, "statuses": dict(statuses),
            "other_5xx": other_5xx, "unexpected": unexpected,
            "missing_retry_after": missing_retry, "failures": dict(failures),
            "connections": client.opened, "p50_95_99_ms": _ms3(latencies),
            "recovery_s": recovered, "probes": probes, "drained_s": drained,
            "healthy_ms": 1000 * healthy_s,
            "met": (unexpected == 0 and missing_retry == 0 and not failures
                    and recovered is not None and recovered < TARGETS["c_recovery_s"])}


# ---------------------------------------------------------------------------- servers
@contextmanager
def _database(kind: str, tmp: Path) -> Iterator[tuple[str, str]]:
    """The database URL for ``kind`` and a description of it."""
    if kind == "sqlite":
        yield (f"sqlite:///{tmp / 'load.db'}",
               "SQLite file on local disk (WAL, synchronous=FULL, busy_timeout 5 s)")
        return
    with temporary_postgres(durable=True) as server:
        url = fresh_postgres_database(server, "fanfold_load")
        import sqlalchemy as sa

        engine = sa.create_engine(url)
        with engine.connect() as conn:
            server_version = conn.exec_driver_sql("SHOW server_version").scalar()
        engine.dispose()
        yield url, (f"PostgreSQL {server_version}, throw-away server on 127.0.0.1 (TCP), "
                    "fsync and synchronous_commit on, psycopg 3")


@contextmanager
def _server(url: str, tmp: Path, name: str, env_extra: dict[str, str]) -> Iterator[str]:
    port = free_port()
    env = {**os.environ, "FANFOLD_DATABASE_URL": url, "FANFOLD_BLAS_THREADS": "1",
           **env_extra}
    env.pop("PROMETHEUS_MULTIPROC_DIR", None)
    procs: list = []
    try:
        start_server([sys.executable, "-m", "service", "serve", "--port", str(port),
                      "--workers", "2"], port, tmp / f"{name}.log", env, procs)
        yield f"http://127.0.0.1:{port}"
    finally:
        for proc in procs:
            stop_server(proc)


def _model_spec() -> dict[str, Any]:
    """The first 8 years of the demo data (5 monthly series), as stored by (a)."""
    rows = DEMO.read_text().splitlines()
    names = rows[0].split(",")[1:]
    frame = [r.split(",") for r in rows[1:97]]
    return {"name": "load benchmark", "dates": [r[0] for r in frame],
            "series": {n: [float(r[i + 1]) for r in frame] for i, n in enumerate(names)}}


def run_database(kind: str, seconds: float) -> dict[str, Any]:
    body = json.dumps(build_request()).encode()
    with tempfile.TemporaryDirectory() as tmpdir:
        tmp = Path(tmpdir)
        with _database(kind, tmp) as (url, described):
            load_before = os.getloadavg()[0]
            with _server(url, tmp, "unlimited", {"FANFOLD_RATE_LIMIT_PER_MINUTE": "0"}) as base:
                created = httpx.post(f"{base}/v1/models", json=_model_spec(), timeout=120)
                if created.status_code != 201:
                    raise RuntimeError(f"storing the model failed: {created.status_code} "
                                       f"{created.text[:500]}")
                a = asyncio.run(dashboards(base, created.json()["id"], seconds))
                b = asyncio.run(forecasts(base, body, seconds))
                if b["per_second"]:  # what the rate limit protects from: (c) without it
                    c_open = asyncio.run(overload(base, body,
                                                  OVERLOAD_FACTOR * b["per_second"],
                                                  seconds / 2, 2 * b["p50_s"]))
            if not b["per_second"] or b["p50_s"] != b["p50_s"]:
                raise RuntimeError(f"no forecast succeeded in (b): {b}")
            with _server(url, tmp, "limited", {}) as base:  # the default rate limit
                c = asyncio.run(overload(base, body, OVERLOAD_FACTOR * b["per_second"],
                                         seconds / 2, 2 * b["p50_s"]))
            load_after = os.getloadavg()[0]
    return {"database": kind, "described": described, "a": a, "b": b, "c": c,
            "c_open": c_open,
            "load": (load_before, load_after)}


# ---------------------------------------------------------------------------- report
def _yes(met: bool) -> str:
    return "yes" if met else "**no**"


def _section(r: dict[str, Any]) -> list[str]:
    a, b, c = r["a"], r["b"], r["c"]
    recovery = "never (60 s)" if c["recovery_s"] is None else f"{c['recovery_s']:.2f} s"
    return [
        f"## {r['database']}: {r['described']}", "",
        f"Load average (1 min) before {r['load'][0]:.2f}, after {r['load'][1]:.2f}.", "",
        "| workload | requests | result | p50 / p95 / p99 ms | target | met |",
        "|---|---|---|---|---|---|",
        f"| (a) {a['clients']} dashboards poll the fan chart with If-None-Match each "
        f"second | {a['polls']} polls (+{a['first_loads']} first loads: {a['first_ms']} "
        f"ms) | {100 * a['share_304']:.2f}% 304; statuses {a['statuses']}; client failures "
        f"{a['failures'] or 0}; distinct ETags {a['distinct_etags']} | {a['p50_95_99_ms']} "
        f"| p99 < 50 ms, > 95% 304 | {_yes(a['met'])} |",
        f"| (b) {b['clients']} clients post one-shot forecasts back to back | "
        f"{b['requests']} | {b['per_second']:.1f} req/s; errors "
        f"{100 * b['error_share']:.2f}%; statuses {b['statuses']}; client failures "
        f"{b['failures'] or 0} | {b['p50_95_99_ms']} | no errors, p99 < 500 ms | "
        f"{_yes(b['met'])} |",
        f"| (c) overload: {c['rate']:.1f} req/s scheduled (2x (b)), sent at "
        f"{c['send_rate']:.1f} req/s over {c['connections']} connections, rate limit on | "
        f"{c['sent']} | statuses "
        f"{c['statuses']}; other 5xx {c['other_5xx']}; unexpected statuses "
        f"{c['unexpected']}; 429/503 without Retry-After {c['missing_retry_after']}; "
        f"client failures {c['failures'] or 0}; recovered (200 within "
        f"{c['healthy_ms']:.0f} ms) after {recovery}, last answer {c['drained_s']:.2f} s "
        f"after the load stopped | {c['p50_95_99_ms']} | only 429/503 with Retry-After, "
        f"recovery < 10 s | {_yes(c['met'])} |",
        _open_row(r["c_open"]),
        "",
    ]


def _open_row(c: dict[str, Any]) -> str:
    """(c) on the server of (a) and (b), without the rate limit: the load shedding
    (``FANFOLD_MAX_IN_FLIGHT``) alone; judged by (c)'s criteria, outside the verdict."""
    recovery = "never (60 s)" if c["recovery_s"] is None else f"{c['recovery_s']:.2f} s"
    return (f"| (c') the same overload without the rate limit (load shedding only) | "
            f"{c['sent']} | statuses {c['statuses']}; other 5xx {c['other_5xx']}; 429/503 "
            f"without Retry-After {c['missing_retry_after']}; client failures "
            f"{c['failures'] or 0}; recovered after {recovery}, last answer "
            f"{c['drained_s']:.2f} s after the load stopped | {c['p50_95_99_ms']} | "
            f"(c)'s, not in the issue | {_yes(c['met'])} |")


def report(results: list[dict[str, Any]], seconds: float, note: str | None) -> str:
    versions = ", ".join(f"{p} {version(p)}" for p in
                         ("fastapi", "uvicorn", "sqlalchemy", "psycopg", "httpx"))
    lines = [
        "# Load against a real server (2 workers, loopback)", "",
        f"- date {dt.datetime.now().isoformat(timespec='seconds')}; commit "
        f"{repo_commit('service', 'priors')}",
        f"- machine: {platform.machine()} {cpu_model()}, {os.cpu_count()} cores; Python "
        f"{platform.python_version()}; {versions}",
        f"- settings: `fanfold serve --workers 2`, FANFOLD_BLAS_THREADS=1; (a) and (b) "
        f"with the rate limit off, {seconds:g} s each; (c) {seconds / 2:g} s with the "
        "default per-tenant rate limit (600/min and a burst of 60 per worker process); one "
        "asyncio client process on the same machine as the server (httpx for (a), a "
        "minimal keep-alive HTTP/1.1 client for (b) and (c): httpx's CPU cost per request "
        "made (b) measure the client)",
        "- request of (b) and (c): scenario S of run_service_benchmark.py (n=3, p=4, T=120, "
        "1000 draws, h=12, quantiles 0.05/0.5/0.95); model of (a): the first 8 years of "
        "the demo data (5 series, configuration 'auto'), fan chart on its defaults",
    ]
    if note:
        lines.append(f"- note: {note}")
    lines.append("")
    for r in results:
        lines += _section(r)
    verdict = all(r[w]["met"] for r in results for w in "abc")
    lines += [f"All targets met: {_yes(verdict)}.", ""]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    parser.add_argument("--database", choices=("sqlite", "postgres", "both"), default="both")
    parser.add_argument("--seconds", type=float, default=60.0,
                        help="length of (a) and of (b); (c) runs half as long")
    parser.add_argument("--out", type=Path, default=HERE / "results" / "load.md")
    parser.add_argument("--note", help="a line for the results file (e.g. other load)")
    args = parser.parse_args(argv)
    kinds = ("sqlite", "postgres") if args.database == "both" else (args.database,)
    results = []
    for kind in kinds:
        print(f"== {kind} ==", flush=True)
        results.append(run_database(kind, args.seconds))
        print(json.dumps(results[-1], indent=1, default=str), flush=True)
    text = report(results, args.seconds, args.note)
    print(text)
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(text)
    return 0 if all(r[w]["met"] for r in results for w in "abc") else 1


if __name__ == "__main__":
    raise SystemExit(main())
