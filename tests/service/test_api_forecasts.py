"""POST /v1/forecasts: JSON and CSV in, the CLI's JSON layout out, problems for errors."""

from __future__ import annotations

import json

import numpy as np
import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.cli.commands import main
from service.config import Settings

from .conftest import DEMO_CSV


def test_json_forecast_layout_and_values(client, demo_body):
    r = client.post("/v1/forecasts", json=demo_body)
    assert r.status_code == 200, r.text
    out = r.json()
    assert set(out) == {"forecasts", "configuration", "lags", "hyperparameters",
                        "log_marginal_likelihood", "log_marginal_likelihood_note",
                        "seed", "draws", "horizon", "rejected_explosive_share", "cumulative",
                        "lead_time_totals", "convergence", "warnings"}
    assert (out["lags"], out["seed"], out["draws"], out["horizon"]) == (2, 11, 300, 4)
    # lags were given; the rest was chosen by the automatic configuration, with reasons
    config = out["configuration"]
    assert {"transforms", "seasonal"} <= set(config["chosen"]) and "lags" not in config["chosen"]
    assert config["reasons"] and config["summary"].startswith("lags 2")
    assert set(config["transforms"]) == {"tyres", "inner_tubes", "brake_pads"}
    tyres = out["forecasts"]["tyres"]
    assert tyres["dates"] == ["2020-01-01", "2020-02-01", "2020-03-01", "2020-04-01"]
    q = np.array([tyres["quantiles"][k] for k in ("0.05", "0.5", "0.95")])
    assert np.all(np.diff(q, axis=0) >= 0)
    assert tyres["quantiles"]["0.5"] == tyres["median"]


def test_same_seed_same_bytes(client, demo_body):
    a = client.post("/v1/forecasts", json=demo_body)
    b = client.post("/v1/forecasts", json=demo_body)
    assert a.content == b.content


def test_csv_body_with_query_settings_matches_the_cli(client, capsys):
    # The CLI's `forecast --json` and the API give the same layout and numbers.
    args = {"horizon": 3, "draws": 200, "seed": 5, "lags": 1, "quantiles": "0.1,0.9"}
    r = client.post("/v1/forecasts", params=args, content=DEMO_CSV.read_bytes(),
                    headers={"content-type": "text/csv"})
    assert r.status_code == 200, r.text
    code = main(["forecast", str(DEMO_CSV), "--horizon", "3", "--draws", "200", "--seed", "5",
                 "--lags", "1", "--quantiles", "0.1,0.9", "--json"])
    assert code == 0
    assert r.json() == json.loads(capsys.readouterr().out)


def test_csv_query_strings_spell_the_automatic_settings_like_the_cli(client, capsys):
    # off / on / auto in a query string mean what they mean on the command line
    args = {"horizon": 2, "draws": 100, "seed": 5, "lags": 1, "seasonal": "on",
            "counts": "off", "season_scale": "off", "sum_coef": "off", "initial": "auto"}
    r = client.post("/v1/forecasts", params=args, content=DEMO_CSV.read_bytes(),
                    headers={"content-type": "text/csv"})
    assert r.status_code == 200, r.text
    assert r.json()["hyperparameters"]["sum_coef"] is None
    code = main(["forecast", str(DEMO_CSV), "--horizon", "2", "--draws", "100", "--seed", "5",
                 "--lags", "1", "--seasonal", "on", "--counts", "off", "--season-scale", "off",
                 "--sum-coef", "off", "--initial", "auto", "--json"])
    assert code == 0
    assert r.json() == json.loads(capsys.readouterr().out)


@pytest.mark.parametrize(("change", "field"), [
    ({"horizonx": 3}, "horizonx"),
    ({"horizon": 0}, "horizon"),
    ({"horizon": 105}, "horizon"),
    ({"draws": 0}, "draws"),
    ({"lags": 0}, "lags"),
    ({"quantiles": [0.5, 0.1]}, "quantiles"),
    ({"quantiles": [0.0, 0.5]}, "quantiles.0"),
    ({"transforms": "cube"}, "transforms"),
    ({"tightness": -1}, "tightness"),
])
def test_invalid_settings_are_422_problems_naming_the_field(client, demo_body, change, field):
    r = client.post("/v1/forecasts", json={**demo_body, **change})
    assert r.status_code == 422
    assert r.headers["content-type"] == "application/problem+json"
    body = r.json()
    assert body["status"] == 422 and body["request_id"]
    assert any(e["field"].startswith(field) for e in body["errors"]), body


def test_non_finite_and_missing_values_are_rejected(client, demo_body):
    text = json.dumps(demo_body).replace("1256.0", "NaN", 1)
    assert "NaN" in text
    r = client.post("/v1/forecasts", content=text, headers={"content-type": "application/json"})
    assert r.status_code == 422 and r.json()["errors"][0]["field"].startswith("series.tyres")
    body = json.loads(json.dumps(demo_body))
    body["series"]["tyres"][3] = None
    assert client.post("/v1/forecasts", json=body).status_code == 422


@pytest.mark.parametrize(("mutate", "kind", "words"), [
    (lambda b: b["series"].update(tyres=[5.0] * 48), "ConstantSeriesError", "no variation"),
    (lambda b: b["series"].update(tyres=b["series"]["tyres"][:-1]), "DataError",
     "different lengths"),
    (lambda b: b.update(transforms={"pedals": "log"}), "SpecificationError", "unknown series"),
    (lambda b: b.update(lags=13, horizon=2), "TooFewObservationsError", "fewer lags"),
    (lambda b: b.update(frequency="fortnightly"), "TimeIndexError", "frequency"),
])
def test_engine_errors_become_422_with_the_engine_message(client, demo_body, mutate, kind,
                                                          words):
    body = json.loads(json.dumps(demo_body))
    mutate(body)
    if kind == "TooFewObservationsError":
        for name in body["series"]:
            body["series"][name] = body["series"][name][:20]
    r = client.post("/v1/forecasts", json=body)
    assert r.status_code == 422, r.text
    problem = r.json()
    assert problem["type"].endswith(kind) or kind == "DataError"
    assert words in problem["detail"]
    assert "Traceback" not in r.text


def test_explosive_data_are_a_422_problem_saying_the_series_explodes(client, demo_body):
    """Doubling each month for 4 years used to come back as 'the regressors are
    collinear'."""
    body = json.loads(json.dumps(demo_body))
    body["series"]["tyres"] = [2.0 ** t for t in range(48)]
    body["transforms"] = None  # in levels ('auto' would take logs)
    r = client.post("/v1/forecasts", json=body)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    problem = r.json()
    assert problem["type"] == "urn:fanfold:problem:ExplosiveDataError"
    assert problem["title"] == "The model cannot use this input"
    assert problem["detail"].startswith("series 'tyres' explodes")
    assert "transforms={'tyres': 'log'}" in problem["detail"]
    assert "collinear" not in problem["detail"]


def test_bad_csv_data_is_a_422_problem(client):
    text = DEMO_CSV.read_text().replace("2016-02-01", "2016-01-01", 1)  # duplicate date
    r = client.post("/v1/forecasts?horizon=2", content=text,
                    headers={"content-type": "text/csv"})
    assert r.status_code == 422 and "more than once" in r.json()["detail"]
    r = client.post("/v1/forecasts?horizon=abc", content=DEMO_CSV.read_bytes(),
                    headers={"content-type": "text/csv"})
    assert r.status_code == 422 and r.json()["errors"][0]["field"] == "horizon"


def test_configured_limits_are_enforced_and_named(demo_body):
    settings = Settings(max_draws=100, max_series=2)
    with TestClient(create_app(settings)) as c:
        r = c.post("/v1/forecasts", json=demo_body)
        assert r.status_code == 422 and r.json()["errors"][0]["field"] == "series"
        body = {**demo_body, "series": dict(list(demo_body["series"].items())[:2])}
        r = c.post("/v1/forecasts", json=body)
        assert r.status_code == 422 and "draws: 300 is over" in r.json()["detail"]


def test_body_size_limit_gives_413(demo_body):
    with TestClient(create_app(Settings(max_body_bytes=1024))) as c:
        assert len(json.dumps(demo_body)) > 1024
        r = c.post("/v1/forecasts", json=demo_body)  # with Content-Length
        assert r.status_code == 413
        assert r.headers["content-type"] == "application/problem+json"

        def chunks():  # streamed without Content-Length
            yield b'{"series": {"a": ['
            for _ in range(400):
                yield b"1.0, "
            yield b"1.0]}}"

        r = c.post("/v1/forecasts", content=chunks(),
                   headers={"content-type": "application/json"})
        assert r.status_code == 413


def test_unsupported_content_type_gives_415(client):
    r = client.post("/v1/forecasts", content=b"tyres 1 2 3",
                    headers={"content-type": "text/plain"})
    assert r.status_code == 415 and r.json()["status"] == 415


def test_unexpected_errors_are_500_problems_without_internals(monkeypatch, settings,
                                                              demo_body):
    import service.api.routes.forecasts as route

    def boom(*args, **kwargs):
        raise RuntimeError("secret internals")

    monkeypatch.setattr(route, "run_forecast", boom)
    with TestClient(create_app(settings), raise_server_exceptions=False) as c:
        r = c.post("/v1/forecasts", json=demo_body, headers={"X-Request-ID": "abc-123"})
    assert r.status_code == 500
    assert "secret" not in r.text and "Traceback" not in r.text
    assert r.json()["request_id"] == "abc-123" == r.headers["x-request-id"]


def test_openapi_documents_both_media_types_and_limits(client):
    spec = client.get("/openapi.json").json()
    op = spec["paths"]["/v1/forecasts"]["post"]
    assert set(op["requestBody"]["content"]) == {"application/json", "text/csv"}
    schema = spec["components"]["schemas"]["ForecastCreate"]
    assert schema["properties"]["draws"]["maximum"] == 10_000
    assert schema["properties"]["horizon"]["maximum"] == 104
    assert schema["examples"][0]["series"]["tyres"][0] == 1256
    assert {"413", "415", "422"} <= set(op["responses"])


@pytest.mark.parametrize("extra, field", [
    ({"horizon": True}, "horizon"),
    ({"quantiles": [0.1, True]}, "quantiles"),
    ({"lags": False}, "lags"),
])
def test_json_true_false_is_not_a_number(client, demo_body, extra, field):
    # pydantic's lax mode would read true as 1; a planning system sending a boolean where
    # a number belongs has a bug we should report, not guess around
    r = client.post("/v1/forecasts", json={**demo_body, **extra})
    assert r.status_code == 422 and r.json()["errors"][0]["field"] == field


@pytest.mark.parametrize("bad", [True, "3"])
def test_data_values_must_be_json_numbers(client, demo_body, bad):
    # data values are strict numbers: true/false and numeric strings are refused by name
    series = {name: list(values) for name, values in demo_body["series"].items()}
    first = next(iter(series))
    series[first][2] = bad
    r = client.post("/v1/forecasts", json={**demo_body, "series": series})
    assert r.status_code == 422
    assert r.json()["errors"][0]["field"].startswith(f"series.{first}.2")


def test_small_one_shots_run_inline_and_large_ones_keep_the_timeout(settings, demo_body):
    # A one-shot above Settings.inline_max_cost goes to the thread pool under the
    # request timeout (503 + Retry-After when over it); a small one runs on the event
    # loop and is answered whatever the timeout, since it takes a few ms.
    from fastapi.testclient import TestClient

    from service.app import create_app

    slow = settings.model_copy(update={"request_timeout_s": 1e-6, "inline_max_cost": 0.0})
    with TestClient(create_app(slow)) as c:
        r = c.post("/v1/forecasts", json=demo_body)
    assert r.status_code == 503 and r.headers["retry-after"] == "5"
    assert "longer than" in r.json()["detail"]
    inline = settings.model_copy(update={"request_timeout_s": 1e-6})
    with TestClient(create_app(inline)) as c:
        r = c.post("/v1/forecasts", json=demo_body)
    assert r.status_code == 200


def test_fifty_series_are_served_on_the_default_limits(client):
    """A wholesaler has hundreds of SKUs; the server refused more than 20 series per model
    while the engine fits 50 in well under a second (README, limits and their cost)."""
    rng = np.random.default_rng(8)  # invented series: sizes only
    values = 100 + np.cumsum(rng.normal(size=(110, 50)), axis=0)  # enough rows for 50 x 1 lag
    body = {"series": {f"sku{i:03d}": values[:, i].round(2).tolist() for i in range(50)},
            "start": "2021-01-01", "frequency": "MS", "horizon": 3, "draws": 200, "seed": 1,
            "lags": 1, "transforms": "none", "seasonal": False}
    answer = client.post("/v1/forecasts", json=body)
    assert answer.status_code == 200, answer.text
    assert len(answer.json()["forecasts"]) == 50
    too_many = {**body, "series": {f"sku{i:03d}": values[:, i % 50].round(2).tolist()
                                   for i in range(101)}}
    refused = client.post("/v1/forecasts", json=too_many)
    assert refused.status_code == 422 and refused.json()["errors"][0]["field"] == "series"


def test_csv_dayfirst_query_parameter_reads_day_first_dates(client):
    header, *rows = DEMO_CSV.read_text().splitlines()  # rows like 2016-01-01,1256,...
    day_first = "\n".join([header] + [f"{r[8:10]}/{r[5:7]}/{r[:4]}{r[10:]}" for r in rows])
    query = "horizon=2&draws=100&seed=5&lags=1"
    r = client.post(f"/v1/forecasts?{query}", content=day_first,
                    headers={"content-type": "text/csv"})
    assert r.status_code == 422 and r.json()["errors"][0]["field"] == "dayfirst"
    assert "dayfirst=true" in r.json()["detail"]
    r = client.post(f"/v1/forecasts?{query}&dayfirst=true", content=day_first,
                    headers={"content-type": "text/csv"})
    assert r.status_code == 200, r.text
    iso = client.post(f"/v1/forecasts?{query}", content=DEMO_CSV.read_bytes(),
                      headers={"content-type": "text/csv"})
    assert r.json() == iso.json()  # dayfirst reads the file; it is no model setting
    r = client.post(f"/v1/forecasts?{query}&dayfirst=maybe", content=day_first,
                    headers={"content-type": "text/csv"})
    assert r.status_code == 422 and r.json()["errors"][0]["field"] == "dayfirst"


def test_a_json_null_inside_a_series_is_called_a_missing_value(client, demo_body):
    demo_body["series"]["tyres"][10] = None  # the 11th value: 2016-11-01
    r = client.post("/v1/forecasts", json=demo_body)
    assert r.status_code == 422
    assert ("series 'tyres' has a missing value (an empty cell, NaN or null) at 2016-11-01 "
            "(data row 11)") in r.json()["detail"]


def test_advice_about_the_data_comes_back_in_the_answer(client):
    """A short history for the lag order was only a Python warning on the server (stderr,
    or a 500 where warnings are errors); it is part of the answer now."""
    rng = np.random.default_rng(9)  # invented series: sizes only
    values = 100 + np.cumsum(rng.normal(size=(30, 6)), axis=0)
    body = {"series": {f"sku{i}": values[:, i].round(2).tolist() for i in range(6)},
            "start": "2023-01-01", "frequency": "MS", "horizon": 2, "draws": 100, "seed": 1,
            "lags": 3, "transforms": "none", "seasonal": False}
    answer = client.post("/v1/forecasts", json=body)
    assert answer.status_code == 200, answer.text
    assert any(w.startswith("short history for 3 lag(s)") for w in answer.json()["warnings"])
    stored = client.post("/v1/models", json={k: v for k, v in body.items()
                                             if k not in ("horizon", "draws")})
    assert stored.status_code == 201, stored.text
    assert any("short history" in w for w in stored.json()["warnings"])
    again = client.get(f"/v1/models/{stored.json()['id']}").json()  # restored: same advice
    assert again["warnings"] == stored.json()["warnings"]
    fc = client.post(f"/v1/models/{stored.json()['id']}/forecasts", json={"horizon": 2})
    assert any("short history" in w for w in fc.json()["warnings"])
