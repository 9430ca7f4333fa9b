"""Models with prior="independent" (Gibbs): fits, stored draws, jobs, limits, updates.

Small runs throughout (2 chains, 50 burn-in sweeps, 100 draws, VAR(2) on three demo
series): the diagnostics then say "do not trust this fit", which is what they should say.
"""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient
from sqlalchemy import update

from priors import FanfoldVAR
from service.app import create_app
from service.compute.engine import forecast_answer, frame_from_spec, model_params
from service.config import Settings
from service.orm import StoredModel
from service.schemas import ModelCreate, ModelForecastCreate
from service.serialization import CorruptBlobError, draws_from_blob, draws_to_blob

from .helpers import wait_for_job

GIBBS = {"lags": 2, "prior": "independent", "chains": 2, "burn": 50, "keep": 100}
pytestmark = pytest.mark.both_databases
SUMMARY_KEYS = {"worst_r_hat", "min_ess_bulk", "min_ess_tail", "ok", "messages", "thresholds"}


@pytest.fixture
def body(demo_body):
    series = {k: v for k, v in demo_body.items() if k in ("series", "start", "frequency")}
    return {**series, **GIBBS, "cross": 0.5, "seed": 5}


def _engine_fit(body: dict) -> FanfoldVAR:
    """The same fit in-process, from the same seed."""
    spec = ModelCreate.model_validate(body)
    return FanfoldVAR(**model_params(spec)).fit(frame_from_spec(spec),
                                                rng=np.random.default_rng(body["seed"]))


def _app(database_url: str, **limits) -> TestClient:
    """The service on the test's database, without the rate limit (tests poll often)."""
    return TestClient(create_app(Settings(database_url=database_url,
                                          rate_limit_per_minute=0, **limits)))


def test_sync_fit_stores_seed_draws_and_diagnostics(client, body):
    r = client.post("/v1/models", json=body)
    assert r.status_code == 201, r.text
    model = r.json()
    assert model["settings"]["seed"] == 5 and model["settings"]["chains"] == 2
    assert model["settings"]["workers"] == 1  # the server's parallelism is its job threads
    assert model["log_marginal_likelihood"] is None
    assert model["hyperparameters"]["cross"] == 0.5
    diagnostics = model["diagnostics"]
    assert set(diagnostics) == SUMMARY_KEYS and diagnostics["ok"] is False
    assert any("ESS below" in m for m in diagnostics["messages"])  # 200 draws: too few
    assert diagnostics["worst_r_hat"] > 1 and diagnostics["min_ess_bulk"] > 0
    assert client.get(r.headers["location"]).json() == model  # restored from the draws
    # coefficient summaries come from the draws, as the engine computes them
    engine = _engine_fit(body)
    np.testing.assert_allclose([c["mean"] for c in model["coefficients"]],
                               engine.coefficients()["mean"].to_numpy(), rtol=1e-12)
    exact = client.post("/v1/models", json={**body, "prior": "minnesota", "cross": 1.0})
    assert exact.json()["diagnostics"] is None and "seed" not in exact.json()["settings"]


def test_a_fresh_seed_is_recorded_and_reproduces_the_draws(client, body):
    first = client.post("/v1/models", json={**body, "seed": None}).json()
    seed = first["settings"]["seed"]
    assert isinstance(seed, int) and 0 <= seed < 2**32
    again = client.post("/v1/models", json={**body, "seed": seed}).json()
    assert again["coefficients"] == first["coefficients"]
    other = client.post("/v1/models", json={**body, "seed": seed + 1}).json()
    assert other["coefficients"] != first["coefficients"]


def test_stored_forecast_equals_the_engines_with_the_same_seeds(client, body):
    model_id = client.post("/v1/models", json=body).json()["id"]
    ask = {"horizon": 4, "draws": 300, "seed": 11, "quantiles": [0.1, 0.5, 0.9]}
    stored = client.post(f"/v1/models/{model_id}/forecasts", json=ask)
    assert stored.status_code == 200, stored.text
    engine = forecast_answer(_engine_fit(body), ModelForecastCreate(**ask), Settings())
    assert stored.json() == engine
    # the one-shot forecast drives the chains and the paths with its one seed
    oneshot = client.post("/v1/forecasts", json={**body, **ask, "seed": 5})
    again = client.post(f"/v1/models/{model_id}/forecasts", json={**ask, "seed": 5})
    assert oneshot.status_code == 200 and oneshot.json() == again.json()
    assert oneshot.json()["log_marginal_likelihood"] is None


def test_draws_round_trip_exactly_and_are_checked(body):
    draws = _engine_fit(body).sampler_
    blob, meta = draws_to_blob(draws)
    back = draws_from_blob(blob, meta)
    assert back.B.dtype == np.float32 and back.Sigma.dtype == np.float32
    assert np.array_equal(back.B, draws.B) and np.array_equal(back.Sigma, draws.Sigma)
    assert back.settings == draws.settings and meta["format"] == "fanfold-gibbs-1"
    assert len(blob) == 4 * (draws.B.size + draws.Sigma.size)  # float32, nothing else
    flipped = bytes([blob[0] ^ 1]) + blob[1:]
    with pytest.raises(CorruptBlobError, match="checksum"):
        draws_from_blob(flipped, meta)
    short = blob[:-4]
    with pytest.raises(CorruptBlobError, match="size"):
        draws_from_blob(short, {**meta, "sha256": hashlib.sha256(short).hexdigest()})
    with pytest.raises(CorruptBlobError, match="format"):
        draws_from_blob(blob, {**meta, "format": "pickle"})


def test_corrupt_stored_draws_are_a_500_without_internals(database_url, body):
    with _app(database_url) as c:
        model_id = c.post("/v1/models", json=body).json()["id"]
        with c.app.state.sessions() as s:
            blob = s.get(StoredModel, model_id).draws
            s.execute(update(StoredModel).where(StoredModel.id == model_id)
                      .values(draws=blob[:100] + bytes([blob[100] ^ 1]) + blob[101:]))
            s.commit()
        r = c.get(f"/v1/models/{model_id}")
        assert r.status_code == 500 and "checksum" not in r.text
        assert r.headers["content-type"] == "application/problem+json"


def _run_job_observed(app: TestClient, location: str, monkeypatch, on_progress=None
                      ) -> list[float]:
    """Run the queued job in this thread, recording the job's progress as the API shows
    it at every progress report of the fit (written at every report here)."""
    import service.jobs.runner as jobs

    monkeypatch.setattr(jobs, "PROGRESS_INTERVAL_S", 0.0)
    runner = app.app.state.jobs
    seen: list[float] = []
    make = runner._progress

    def observed(mine):
        report = make(mine)

        def progress(done: int, total: int) -> None:
            if on_progress is not None:
                on_progress(len(seen))
            report(done, total)
            seen.append(app.get(location).json()["progress"])

        return progress

    monkeypatch.setattr(runner, "_progress", observed)
    job_id, attempt = runner._claim()
    runner.run_one(job_id, attempt)
    return seen


def test_a_long_gibbs_fit_runs_as_a_job_with_rising_progress(database_url, body, monkeypatch):
    with _app(database_url, sync_max_gibbs_work=1, job_workers=0) as c:
        r = c.post("/v1/models", json=body)
        assert r.status_code == 202 and r.headers["location"].startswith("/v1/jobs/")
        location = r.headers["location"]
        assert c.get(location).json()["status"] == "queued"
        seen = _run_job_observed(c, location, monkeypatch)
        assert len(seen) >= 10 and seen == sorted(seen)
        assert 0.1 < seen[0] < 0.2 and seen[-1] == pytest.approx(0.9)
        job = c.get(location).json()
        assert job["status"] == "succeeded" and job["progress"] == 1.0
        stored = c.get(job["result"]).json()
        assert stored["settings"]["seed"] == 5 and set(stored["diagnostics"]) == SUMMARY_KEYS
    with _app(database_url, job_workers=0) as direct:  # the same fit, answered at once
        assert direct.post("/v1/models", json=body).json()["coefficients"] == \
            stored["coefficients"]


def test_cancelling_a_running_gibbs_fit_stops_it(database_url, body, monkeypatch):
    with _app(database_url, sync_max_gibbs_work=1, job_workers=0) as c:
        location = c.post("/v1/models", json=body).headers["location"]

        def cancel_once(reports: int) -> None:
            if reports == 2:
                assert c.delete(location).status_code == 202

        seen = _run_job_observed(c, location, monkeypatch, on_progress=cancel_once)
        assert len(seen) == 2  # the report after the request stopped the chains
        job = c.get(location).json()
        assert job["status"] == "cancelled" and job["result"] is None
        assert c.get("/v1/models").json()["data"] == []


def _series(rows: pd.DataFrame) -> dict:
    return {"series": {c: rows[c].astype(float).tolist() for c in rows},
            "start": rows.index[0].date().isoformat(), "frequency": "MS"}


def test_observations_rerun_the_chains_in_a_job(client, demo):
    part = demo[["tyres", "chains"]]
    body = {**_series(part.iloc[:100]), **GIBBS, "seed": 3}
    created = client.post("/v1/models", json=body).json()
    model_url = f"/v1/models/{created['id']}"
    chart = client.get(f"{model_url}/fan-chart")
    r = client.post(f"{model_url}/observations", json=_series(part.iloc[100:]))
    assert r.status_code == 202 and r.headers["location"].startswith("/v1/jobs/")
    assert r.json()["kind"] == "update_model"
    job = wait_for_job(client, r.headers["location"])
    assert job["status"] == "succeeded" and job["result"] == model_url
    updated = client.get(model_url).json()
    assert updated["version"] == created["version"] + 1
    assert updated["span"]["end"] == "2025-12-01"
    assert updated["hyperparameters"] == created["hyperparameters"]  # no retuning
    assert updated["settings"] == created["settings"]  # the same seed, recorded
    assert set(updated["diagnostics"]) == SUMMARY_KEYS
    again = client.get(f"{model_url}/fan-chart", headers={"If-None-Match": chart.headers["etag"]})
    assert again.status_code == 200 and again.json()["dates"][0] == "2026-01-01"
    # the engine's append from the same seed gives the same draws
    spec = ModelCreate.model_validate(body)
    fitted = FanfoldVAR(**model_params(spec)).fit(part.iloc[:100], rng=np.random.default_rng(3))
    grown = fitted.append(part.iloc[100:], rng=np.random.default_rng(3))
    np.testing.assert_allclose([c["mean"] for c in updated["coefficients"]],
                               grown.coefficients()["mean"].to_numpy(), rtol=1e-12)


def test_an_update_queued_against_an_old_version_fails_with_409(database_url, demo, monkeypatch):
    part = demo[["tyres", "chains"]]
    with _app(database_url, job_workers=0) as c:
        model_url = c.post("/v1/models", json={**_series(part.iloc[:100]), **GIBBS,
                                                "seed": 3}).headers["location"]
        first = c.post(f"{model_url}/observations", json=_series(part.iloc[100:110]))
        second = c.post(f"{model_url}/observations", json=_series(part.iloc[100:110]))
        runner = c.app.state.jobs
        for _ in range(2):
            runner.run_one(*runner._claim())
        assert c.get(first.headers["location"]).json()["status"] == "succeeded"
        late = c.get(second.headers["location"]).json()
        assert late["status"] == "failed" and late["problem"]["status"] == 409
        assert "changed (version 1 -> 2)" in late["problem"]["detail"]
        assert c.get(model_url).json()["version"] == 2


@pytest.mark.parametrize(("limits", "changes", "field", "advice"), [
    ({"max_gibbs_work": 1e4}, {}, "keep", "lower keep, thin, burn or chains"),
    ({"max_gibbs_work": 1e4}, {"burn": 5000}, "burn", "lower keep, thin, burn or chains"),
    ({"max_stored_draws": 1000}, {}, "keep", "lower keep or chains"),
])
def test_gibbs_limits_are_422_problems_naming_the_field(database_url, body, limits, changes,
                                                        field, advice):
    with _app(database_url, **limits) as c:
        r = c.post("/v1/models", json={**body, **changes})
        assert r.status_code == 422 and r.json()["title"] == "Limit exceeded"
        assert r.json()["errors"][0]["field"] == field and advice in r.json()["detail"]
        assert c.post("/v1/forecasts", json={**body, **changes}).status_code == 422
        assert c.get("/v1/models").json()["data"] == []


def test_gibbs_settings_are_validated(client, body):
    for bad, field in (({"chains": 17}, "chains"), ({"keep": 5}, "keep"),
                       ({"thin": 0}, "thin"), ({"burn": -1}, "burn"), ({"cross": 0}, "cross"),
                       ({"cross": 11}, "cross")):
        r = client.post("/v1/models", json={**body, **bad})
        assert r.status_code == 422 and r.json()["errors"][0]["field"] == field, bad
    r = client.post("/v1/models", json={**body, "prior": "minnesota"})  # cross 0.5
    assert r.status_code == 422 and "needs prior 'independent'" in r.text
    backtest = {**body, "origins": 2, "horizon": 2, "draws": 100}
    r = client.post("/v1/backtests", json=backtest)  # Gibbs refits at every origin
    assert r.status_code == 202, r.text
    job = wait_for_job(client, r.headers["location"])
    assert job["status"] == "succeeded", job
    out = client.get(job["result"]).json()
    assert {r["model"] for r in out["scores"]} >= {"model", "ols_var"}
    r = client.post("/v1/backtests", json={**backtest, "origins": 100, "keep": 20_000,
                                            "chains": 16})
    assert r.status_code == 422 and r.json()["errors"][0]["field"] in ("origins", "keep")


def test_one_shot_forecasts_with_the_independent_prior(database_url, body):
    ask = {**body, "horizon": 3, "draws": 200}
    with _app(database_url) as c:
        r = c.post("/v1/forecasts", json={**ask, "seed": None})
        assert r.status_code == 200, r.text
        seed = r.json()["seed"]  # reported, and reproduces the chains and the paths
        assert c.post("/v1/forecasts", json={**ask, "seed": seed}).json() == r.json()
        # two years that inform the tightness (a straight-line year leaves the marginal
        # likelihood flat down to the search bound, which warns)
        csv = "date,tyres,chains\n" + "".join(
            f"{2020 + (m - 1) // 12}-{(m - 1) % 12 + 1:02d}-01,"
            f"{100 + 3 * m + m % 4 + m * m % 7},{50 + m % 5 + 3 * m % 4}\n"
            for m in range(1, 25))
        r = c.post("/v1/forecasts?horizon=2&draws=100&seed=1&lags=1&prior=independent"
                   "&chains=2&burn=20&keep=50&cross=0.5", content=csv,
                   headers={"Content-Type": "text/csv"})
        assert r.status_code == 200, r.text
    with _app(database_url, sync_max_gibbs_work=1) as c:
        r = c.post("/v1/forecasts", json=ask)
        assert r.status_code == 422 and r.json()["errors"][0]["field"] == "keep"
        assert "POST /v1/models" in r.json()["detail"]


def test_the_schema_gains_revision_0005_and_loses_it_again(database_url, body):
    from alembic import command

    from service.db import make_engine, make_session_factory
    from service.migrate import _config, upgrade
    from service.store import get_model, load_fitted

    with _app(database_url) as c:
        gibbs = c.post("/v1/models", json=body).json()["id"]
        exact = c.post("/v1/models", json={**body, "prior": "minnesota",
                                            "cross": 1.0}).json()["id"]
    engine = make_engine(database_url)
    cfg = _config()
    with engine.begin() as conn:
        cfg.attributes["connection"] = conn
        command.downgrade(cfg, "0004")
    upgrade(engine)  # back to head: the columns return, empty
    with make_session_factory(engine)() as s:
        assert get_model(session=s, tenant="public", model_id=gibbs).draws is None
        row = get_model(session=s, tenant="public", model_id=exact)
        assert row.diagnostics is None and load_fitted(row).sampler_ is None
    engine.dispose()


def test_planning_answers_come_from_the_stored_draws(client, body):
    model_url = client.post("/v1/models", json=body).headers["location"]
    scenario = {"horizon": 3, "draws": 200, "seed": 1,
                "conditions": [{"series": "tyres", "step": 1, "value": 1500}]}
    r = client.post(f"{model_url}/scenarios", json=scenario)
    assert r.status_code == 200, r.text
    assert r.json()["forecasts"]["tyres"]["mean"][0] == pytest.approx(1500)
    for path in ("impulse-responses", "variance-decomposition", "fan-chart"):
        r = client.get(f"{model_url}/{path}", params={"horizon": 4, "draws": 200})
        assert r.status_code == 200, (path, r.text)
    advice = {"lead_time": 2, "draws": 500, "seed": 2,
              "items": [{"series": "tyres", "on_hand": 2000, "service_level": 0.95}]}
    r = client.post(f"{model_url}/replenishment", json=advice)
    assert r.status_code == 200, r.text


def test_answers_from_unconverged_chains_carry_the_diagnostics_and_a_warning(client, demo):
    part = demo.iloc[:72][["tyres", "inner_tubes"]]
    body = {"series": {c: part[c].astype(float).tolist() for c in part},
            "start": "2016-01-01", "frequency": "MS", "lags": 1, "prior": "independent",
            "chains": 2, "burn": 0, "keep": 20, "seed": 5}
    one_shot = client.post("/v1/forecasts", json={**body, "horizon": 2, "draws": 50})
    assert one_shot.status_code == 200, one_shot.text
    answer = one_shot.json()
    assert answer["convergence"]["ok"] is False
    assert answer["convergence"]["worst_r_hat"] is not None
    assert answer["warnings"][0].startswith("the sampler's chains have not converged")
    stored = client.post("/v1/models", json=body)
    assert stored.status_code == 201, stored.text
    assert stored.json()["warnings"] and stored.json()["diagnostics"]["ok"] is False
    fc = client.post(f"/v1/models/{stored.json()['id']}/forecasts",
                     json={"horizon": 2, "draws": 50, "seed": 1}).json()
    assert fc["convergence"] == stored.json()["diagnostics"]  # the stored summary, not redone
    assert fc["warnings"]
    exact = client.post("/v1/forecasts", json={**{k: v for k, v in body.items()
                                                  if k not in ("prior", "chains", "burn",
                                                               "keep")},
                                               "horizon": 2, "draws": 50}).json()
    assert exact["convergence"] is None and exact["warnings"] == []


def test_stochastic_volatility_on_its_defaults_runs_as_a_job(database_url, demo):
    """The CLI fits it in seconds; the server refused it (422, work over the limit) because
    its cost model counted every sweep as a QR at 20 k rows of the largest lag order."""
    from fastapi.testclient import TestClient

    from service.app import create_app
    from service.config import Settings

    settings = Settings(database_url=database_url, job_workers=0)
    body = {"series": {c: demo[c].astype(float).tolist() for c in demo},
            "start": "2016-01-01", "frequency": "MS", "volatility": "common"}
    with TestClient(create_app(settings)) as client:
        answer = client.post("/v1/models", json=body)
        assert answer.status_code == 202, answer.text  # a job, like other long fits
        assert answer.json()["kind"] == "fit_model"


def test_stochastic_volatility_and_outlier_models_are_stored_and_forecast(client, demo):
    part = demo.iloc[:72][["tyres", "inner_tubes"]]
    body = {"series": {c: part[c].astype(float).tolist() for c in part},
            "start": "2016-01-01", "frequency": "MS", "lags": 1, "chains": 2,
            "burn": 20, "keep": 40, "seed": 3}
    sv = client.post("/v1/models", json={**body, "volatility": "common"})
    assert sv.status_code == 201, sv.text
    assert sv.json()["settings"]["volatility"] == "common"
    fc = client.post(f"/v1/models/{sv.json()['id']}/forecasts",
                     json={"horizon": 2, "draws": 50, "seed": 1})
    assert fc.status_code == 200, fc.text
    out = client.post("/v1/models", json={**body, "prior": "independent",
                                          "outliers": [{"start": "2018-04-01", "periods": 2}]})
    assert out.status_code == 201, out.text
    assert out.json()["settings"]["outliers"] == [["2018-04-01", 2]]
    bad = client.post("/v1/models", json={**body, "outliers": [{"start": "2018-04-01"}]})
    assert bad.status_code == 422 and "independent" in bad.text
    bad = client.post("/v1/models", json={**body, "prior": "flat", "volatility": "common"})
    assert bad.status_code == 422 and "minnesota" in bad.text
    assert sv.json()["log_marginal_likelihood"] is None
    assert "stochastic volatility" in sv.json()["log_marginal_likelihood_note"]
    upd = client.post(f"/v1/models/{sv.json()['id']}/observations",
                      json={"series": {c: demo[c].iloc[72:75].astype(float).tolist()
                                       for c in part}, "start": "2022-01-01",
                            "frequency": "MS"})
    assert upd.status_code == 202  # no exact update with stochastic volatility: a job
