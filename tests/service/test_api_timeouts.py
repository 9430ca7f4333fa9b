"""Work that outlives its answer: timeouts, cooperative cancellation and admission.

Past the request timeout every computing route answers the documented 503 problem (it
was a bare 500 on all but the one-shot forecast) and the work stops at the engine's next
checkpoint instead of keeping a core busy for minutes; work estimated to need longer
than the timeout is refused before it starts (422 naming the field); expensive requests
take more rate-limit tokens.
"""

from __future__ import annotations

import math
import time

import numpy as np
import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.compute.limits import Shape, shocks_seconds
from service.config import Settings
from service.ratelimit import RateLimiter

PROBLEM = "application/problem+json"
_NOISE = np.random.default_rng(5).normal(size=(72, 2))  # invented, for sizes and timing
SERIES = {"tyres": (100 + np.cumsum(_NOISE[:, 0])).round(1).tolist(),
          "tubes": (200 + 5 * _NOISE[:, 1] + 0.3 * np.cumsum(_NOISE[:, 0])).round(1).tolist()}
MODEL = {"series": SERIES, "start": "2019-01-01", "frequency": "MS", "lags": 2,
         "transforms": "none", "seasonal": False, "sum_coef": None, "initial": None}
RANGES = [{"series": s, "step": t, "lower": -1e6, "upper": 1e6}
          for s in ("tyres", "tubes") for t in range(1, 13)]  # 24 ranges


def _client(tmp_path, **overrides) -> TestClient:
    tmp_path.mkdir(parents=True, exist_ok=True)
    settings = Settings(database_url=f"sqlite:///{tmp_path / 't.db'}", job_workers=0,
                        **{"rate_limit_per_minute": 0, **overrides})
    return TestClient(create_app(settings))


def _model(client) -> str:
    created = client.post("/v1/models", json=MODEL)
    assert created.status_code == 201, created.text
    return created.json()["id"]


def _cpu_busy_seconds(window: float = 1.0) -> float:
    """CPU seconds this process used over ``window`` wall-clock seconds."""
    start = time.process_time()
    time.sleep(window)
    return time.process_time() - start


def test_work_past_the_timeout_answers_503_and_stops(tmp_path):
    # admission off in effect (cost_scale tiny) so the long scenario starts at all
    with _client(tmp_path, request_timeout_s=0.5, cost_scale=1e-6) as client:
        mid = _model(client)
        start = time.monotonic()
        answer = client.post(f"/v1/models/{mid}/scenarios", json={
            "horizon": 12, "draws": 2000, "sweeps": 500, "conditions": RANGES})
        assert time.monotonic() - start < 5.0  # about 30 s of work if it ran to the end
        assert answer.status_code == 503, answer.text
        assert answer.headers["content-type"].startswith(PROBLEM)
        assert answer.headers["retry-after"] == "5"
        assert "stopped" in answer.json()["detail"]
        time.sleep(0.5)  # the worker thread reaches its next checkpoint (one sweep)
        assert _cpu_busy_seconds() < 0.3  # nothing left running


ROUTES = [
    ("one-shot forecast", "post", "/v1/forecasts",
     {**MODEL, "horizon": 104, "draws": 10_000}),
    ("stored forecast", "post", "/v1/models/{id}/forecasts", {"horizon": 104, "draws": 10_000}),
    ("fan chart", "get", "/v1/models/{id}/fan-chart", {"horizon": 104, "draws": 10_000}),
    ("impulse responses", "get", "/v1/models/{id}/impulse-responses",
     {"horizon": 104, "draws": 10_000}),
    ("variance decomposition", "get", "/v1/models/{id}/variance-decomposition",
     {"horizon": 104, "draws": 10_000}),
    ("scenario", "post", "/v1/models/{id}/scenarios",
     {"horizon": 12, "draws": 2000, "sweeps": 200, "conditions": RANGES}),
    ("replenishment", "post", "/v1/models/{id}/replenishment",
     {"lead_time": 104, "draws": 10_000,
      "items": [{"series": "tyres", "on_hand": 10, "service_level": 0.9}]}),
    ("model fit", "post", "/v1/models", {**MODEL, "lags": "auto", "transforms": "auto",
                                         "sum_coef": "auto", "initial": "auto"}),
]


@pytest.mark.parametrize(("label", "method", "path", "payload"), ROUTES,
                         ids=[r[0] for r in ROUTES])
def test_every_computing_route_answers_503_past_the_timeout(tmp_path, label, method, path,
                                                            payload):
    with _client(tmp_path, cost_scale=1e-6) as setup:
        mid = _model(setup)
    # the same database, now with a timeout far shorter than any of these requests
    with _client(tmp_path, request_timeout_s=0.02, cost_scale=1e-6) as client:
        url = path.replace("{id}", mid)
        answer = (client.post(url, json=payload) if method == "post"
                  else client.get(url, params=payload))
        assert answer.status_code == 503, answer.text
        assert answer.headers["content-type"].startswith(PROBLEM)
        assert answer.json()["status"] == 503


def test_work_that_cannot_finish_in_time_is_refused_before_it_starts(tmp_path):
    with _client(tmp_path) as client:  # default settings: 60 s timeout
        mid = _model(client)
        start = time.monotonic()
        # the scenario that kept a core busy for 8.5 minutes after its 500
        answer = client.post(f"/v1/models/{mid}/scenarios", json={
            "horizon": 104, "draws": 10_000, "sweeps": 500, "conditions": RANGES})
        assert time.monotonic() - start < 5.0
        assert answer.status_code == 422, answer.text
        body = answer.json()
        assert body["errors"][0]["field"] == "sweeps"
        assert "request timeout of 60 s" in body["detail"]
        # the same scenario, smaller, runs
        small = client.post(f"/v1/models/{mid}/scenarios", json={
            "horizon": 12, "draws": 500, "sweeps": 10, "conditions": RANGES[:4]})
        assert small.status_code == 200, small.text


def test_a_slower_machine_is_told_by_cost_scale(tmp_path):
    with _client(tmp_path, request_timeout_s=2.0) as fast:
        mid = _model(fast)
        params = {"horizon": 104, "draws": 2000}
        assert fast.post(f"/v1/models/{mid}/forecasts", json=params).status_code == 200
    with _client(tmp_path, request_timeout_s=2.0, cost_scale=50.0) as slow:
        refused = slow.post(f"/v1/models/{mid}/forecasts", json=params)
        assert refused.status_code == 422
        assert refused.json()["errors"][0]["field"] == "draws"


def _successes(client, url: str, most: int = 40) -> int:
    """Requests to ``url`` answered before the first 429 (bounded)."""
    for count in range(most):
        if client.get(url).status_code == 429:
            return count
    return most


def test_expensive_requests_take_more_rate_limit_tokens(tmp_path):
    # 1 token a second, a burst of 20, one more token per 13 ms of estimated work
    limits = {"rate_limit_per_minute": 60, "rate_limit_burst": 20, "rate_limit_token_s": 0.013}
    irf = {"horizon": 104, "draws": 10_000}
    extra = math.floor(shocks_seconds(Shape.of(2, 2, 1), **irf) / 0.013)
    assert 5 <= extra <= 15  # the test needs a charge well inside the burst
    with _client(tmp_path / "a", **limits) as client:
        mid = _model(client)
        assert client.get(f"/v1/models/{mid}/impulse-responses", params=irf).status_code == 200
        after_costly = _successes(client, f"/v1/models/{mid}")
    with _client(tmp_path / "b", **limits) as client:
        mid = _model(client)
        assert client.get(f"/v1/models/{mid}").status_code == 200  # a cheap request
        after_cheap = _successes(client, f"/v1/models/{mid}")
    # the costly request took 1 + extra tokens, the cheap one 1 (give or take the
    # refill while they ran: one token a second)
    assert abs((after_cheap - after_costly) - extra) <= 2, (after_cheap, after_costly, extra)


def test_an_expensive_request_without_the_tokens_is_refused(tmp_path):
    with _client(tmp_path, rate_limit_per_minute=60, rate_limit_burst=10,
                 rate_limit_token_s=0.005) as client:
        mid = _model(client)
        for _ in range(5):
            client.get(f"/v1/models/{mid}")
        costly = client.get(f"/v1/models/{mid}/impulse-responses",
                            params={"horizon": 104, "draws": 10_000})
        assert costly.status_code == 429
        assert "estimated work" in costly.json()["detail"]


def test_the_rate_limiter_takes_several_tokens_at_once():
    limiter = RateLimiter(per_minute=60, burst=10)
    assert limiter.acquire("a", now=0.0, tokens=7) == 0.0
    wait = limiter.acquire("a", now=0.0, tokens=5)  # 3 left: 2 more in 2 s
    assert wait == pytest.approx(2.0)
    assert limiter.acquire("a", now=2.0, tokens=5) == 0.0  # refilled, nothing was taken
    assert limiter.acquire("a", now=2.0, tokens=50) == pytest.approx(10.0)  # capped at burst
    assert limiter.acquire("b", now=0.0, tokens=10) == 0.0  # tenants apart


def test_requests_past_the_in_flight_limit_are_shed_with_retry_after(tmp_path, monkeypatch,
                                                                     demo_body):
    """Load shedding: with two requests being answered, a third is a 503 problem with
    Retry-After at once (it queued without bound before); the probes still answer, and
    once the two are done requests are served again."""
    import threading

    import service.api.routes.models as routes

    release, entered = threading.Event(), threading.Semaphore(0)
    real = routes.fan_chart

    def held(*args, **kwargs):
        entered.release()
        assert release.wait(30)
        return real(*args, **kwargs)

    monkeypatch.setattr(routes, "fan_chart", held)
    settings = Settings(database_url=f"sqlite:///{tmp_path / 's.db'}", max_in_flight=2,
                        rate_limit_per_minute=0)
    body = {k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")}
    with TestClient(create_app(settings)) as c:
        chart = f"{c.post('/v1/models', json={**body, 'lags': 1}).headers['location']}" \
                "/fan-chart"
        answers: list = []
        held_requests = [threading.Thread(target=lambda: answers.append(c.get(chart)))
                         for _ in range(2)]
        for t in held_requests:
            t.start()
        for _ in held_requests:  # both are inside the route, holding their slots
            assert entered.acquire(timeout=30)
        shed = c.get(chart)
        assert shed.status_code == 503 and shed.headers["retry-after"] == "1"
        assert shed.headers["content-type"] == "application/problem+json"
        assert "limit" in shed.json()["detail"] and shed.json()["request_id"]
        assert c.get("/readyz").status_code == 200  # probes are never shed
        release.set()
        for t in held_requests:
            t.join(30)
        assert [a.status_code for a in answers] == [200, 200]
        assert c.get(chart).status_code == 200
