"""POST /v1/backtests runs as a job; the scores match the engine run directly."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from priors.backtest import rolling_origin

from .helpers import wait_for_job

pytestmark = pytest.mark.both_databases


def test_backtest_job_returns_the_engine_scores(client, demo):
    part = demo[["tyres", "chains"]]
    body = {"series": {c: part[c].astype(float).tolist() for c in part},
            "start": "2016-01-01", "frequency": "MS", "lags": 1, "origins": 4,
            "horizon": 2, "draws": 100, "period": 12, "seed": 5}
    r = client.post("/v1/backtests", json=body)
    assert r.status_code == 202 and r.headers["location"].startswith("/v1/jobs/")
    job_id = r.json()["id"]
    early = client.get(f"/v1/backtests/{job_id}")
    assert early.status_code in (200, 409)
    job = wait_for_job(client, r.headers["location"])
    assert job["status"] == "succeeded" and job["result"] == f"/v1/backtests/{job_id}"
    out = client.get(job["result"]).json()
    assert out["origins"] == 4
    direct = rolling_origin(part, params={"lags": 1}, origins=4, horizon=2, draws=100,
                            period=12, benchmarks=("ols_var", "random_walk",
                                                   "seasonal_naive"),
                            rng=np.random.default_rng(5)).scores()
    got = pd.DataFrame(out["scores"])
    np.testing.assert_allclose(got["crps"].to_numpy(), direct["crps"].to_numpy(), rtol=1e-9)
    assert {r["model"] for r in out["log_scores"]} == {"model", "ols_var"}
    assert client.get("/v1/backtests/00000000-0000-4000-8000-000000000000").status_code == 404


def test_backtest_input_errors_are_immediate(client, demo):
    body = {"series": {"tyres": demo["tyres"].astype(float).tolist()}, "start": "2016-01-01",
            "frequency": "MS", "origins": 500}
    assert client.post("/v1/backtests", json=body).status_code == 422
    bad = {**body, "origins": 4, "frequency": "fortnightly"}
    assert client.post("/v1/backtests", json=bad).status_code == 422
