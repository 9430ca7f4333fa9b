"""Unusual but plausible requests answer a 4xx problem naming the field, never a 500.

Dates outside the supported calendar (pandas' nanosecond timestamps, 1677-2262; we take
whole years 1678-2261), forecasts that would run past it, frequencies that leave it,
quantile levels that repeat or collide in their 6-digit names, and replenishment windows
longer than the horizon limit. Every case here answered 500 before it was handled.
"""

from __future__ import annotations

import pytest

from service.schemas import quantile_key

from .helpers import wait_for_job

PROBLEM = "application/problem+json"
SERIES = {"a": [float(10 + (i * 7) % 5) for i in range(30)],
          "b": [float(20 + (i * 3) % 7) for i in range(30)]}
OUTPUT = {"horizon": 3, "draws": 100, "seed": 1}
ROUTES = {"/v1/forecasts": OUTPUT, "/v1/models": {}, "/v1/backtests": {**OUTPUT, "origins": 2}}


def _monthly(first_year: int, count: int = 30) -> list[str]:
    return [f"{first_year + i // 12:04d}-{i % 12 + 1:02d}-01" for i in range(count)]


DATE_CASES = [
    # (label, calendar fields, field named in the problem)
    ("start in year 1", {"start": "0001-01-01", "frequency": "MS"}, "start"),
    ("start in year 1500", {"start": "1500-01-01", "frequency": "MS"}, "start"),
    ("dates in year 1500", {"dates": _monthly(1500)}, "dates"),
    ("quarterly from 9990", {"start": "9990-01-01", "frequency": "QS"}, "start"),
    ("monthly from 9995", {"start": "9995-01-01", "frequency": "MS"}, "start"),
    ("dates ending 9999-12", {"dates": _monthly(9997, 36)[-30:]}, "dates"),
    ("every 1000 years", {"start": "2000-01-01", "frequency": "1000YS"}, "start"),
]


def _assert_problem(response, status: int, field: str) -> dict:
    assert response.status_code == status, response.text
    assert response.headers["content-type"].startswith(PROBLEM)
    body = response.json()
    assert body["status"] == status
    assert field in {e["field"] for e in body.get("errors", [])}, body
    return body


@pytest.mark.parametrize("route", list(ROUTES))
@pytest.mark.parametrize(("label", "calendar", "field"), DATE_CASES,
                         ids=[c[0] for c in DATE_CASES])
def test_dates_outside_the_supported_calendar_are_refused_by_name(client, route, label,
                                                                 calendar, field):
    response = client.post(route, json={"series": SERIES, "lags": 1, **ROUTES[route],
                                        **calendar})
    body = _assert_problem(response, 422, field)
    assert "1678-01-01 to 2261-12-31" in body["detail"]
    assert client.get("/v1/models").json()["data"] == []  # nothing stored


def test_dates_at_the_edges_of_the_calendar_are_accepted(client):
    for calendar in ({"start": "1678-01-01", "frequency": "MS"},
                     {"dates": _monthly(2259)[-30:]}):
        response = client.post("/v1/forecasts", json={"series": SERIES, "lags": 1,
                                                      **OUTPUT, **calendar})
        assert response.status_code == 200, response.text


LATE = {"series": SERIES, "lags": 1, "start": "2255-01-01", "frequency": "MS"}  # to 2257-06


def test_a_forecast_past_the_last_supported_date_names_the_horizon(client):
    _assert_problem(client.post("/v1/forecasts", json={**LATE, "horizon": 104, "draws": 100}),
                    422, "horizon")
    assert client.post("/v1/forecasts", json={**LATE, "horizon": 12, "draws": 100}
                       ).status_code == 200
    _assert_problem(client.post("/v1/backtests", json={**LATE, "horizon": 104, "origins": 2}),
                    422, "horizon")


def test_stored_model_routes_name_what_runs_past_the_calendar(client):
    created = client.post("/v1/models", json=LATE)
    assert created.status_code == 201, created.text
    mid = created.json()["id"]
    _assert_problem(client.post(f"/v1/models/{mid}/forecasts", json={"horizon": 104}),
                    422, "horizon")
    _assert_problem(client.get(f"/v1/models/{mid}/fan-chart", params={"horizon": 104}),
                    422, "horizon")
    _assert_problem(client.post(f"/v1/models/{mid}/scenarios", json={
        "horizon": 104, "conditions": [{"series": "a", "step": 1, "value": 10}]}),
        422, "horizon")
    _assert_problem(client.post(f"/v1/models/{mid}/replenishment", json={
        "lead_time": 100, "items": [{"series": "a", "on_hand": 1, "service_level": 0.9}]}),
        422, "lead_time")


QUANTILE_CASES = [
    ("duplicated", [0.5, 0.5]),
    ("unsorted", [0.9, 0.1]),
    ("same name at 6 digits", [0.5, 0.5000001]),
    ("same name near 0.1", [0.05, 0.1, 0.10000004]),
]


@pytest.mark.parametrize(("label", "levels"), QUANTILE_CASES, ids=[c[0] for c in QUANTILE_CASES])
def test_quantile_levels_must_be_distinct_in_their_names(client, label, levels):
    body = {"series": SERIES, "lags": 1, **OUTPUT, "quantiles": levels}
    _assert_problem(client.post("/v1/forecasts", json=body), 422, "quantiles")
    mid = client.post("/v1/models", json={"series": SERIES, "lags": 1}).json()["id"]
    _assert_problem(client.post(f"/v1/models/{mid}/forecasts",
                                json={**OUTPUT, "quantiles": levels}), 422, "quantiles")
    _assert_problem(client.post(f"/v1/models/{mid}/replenishment", json={
        "lead_time": 2, "quantiles": levels,
        "items": [{"series": "a", "on_hand": 1, "service_level": 0.9}]}), 422, "quantiles")


def test_close_but_distinct_levels_keep_their_own_names(client):
    levels = [0.1, 0.100001, 0.5]
    assert len({quantile_key(q) for q in levels}) == 3
    answer = client.post("/v1/forecasts", json={"series": SERIES, "lags": 1, **OUTPUT,
                                                "quantiles": levels})
    assert answer.status_code == 200, answer.text
    assert set(answer.json()["forecasts"]["a"]["quantiles"]) == {"0.1", "0.100001", "0.5"}


@pytest.mark.parametrize("draws", [None, 10_000])
def test_a_replenishment_window_over_the_horizon_limit_names_lead_time(client, draws):
    mid = client.post("/v1/models", json={"series": SERIES, "lags": 1}).json()["id"]
    body = {"lead_time": 104, "review_period": 104, "start": 104,
            "items": [{"series": "a", "on_hand": 1, "service_level": 0.9}]}
    if draws is not None:
        body["draws"] = draws
    answer = _assert_problem(client.post(f"/v1/models/{mid}/replenishment", json=body),
                             422, "lead_time")
    assert "311" in answer["detail"]


def test_a_backtest_of_dates_out_of_range_is_refused_before_it_is_queued(client):
    response = client.post("/v1/backtests", json={"series": SERIES, "lags": 1, **OUTPUT,
                                                   "origins": 2, "dates": _monthly(1500)})
    _assert_problem(response, 422, "dates")
    ok = client.post("/v1/backtests", json={"series": SERIES, "lags": 1, **OUTPUT,
                                            "origins": 2, "start": "2000-01-01",
                                            "frequency": "MS"})
    assert ok.status_code == 202
    assert wait_for_job(client, ok.headers["location"])["status"] == "succeeded"


@pytest.mark.parametrize("route", list(ROUTES))
@pytest.mark.parametrize("freq", ["h", "min", "30min"])
def test_frequencies_finer_than_a_day_are_refused_at_the_door(client, route, freq):
    """They were stored with only the date part, after which every read answered 422
    "timestamp appears more than once" (and one-shot hourly forecasts repeated dates)."""
    response = client.post(route, json={"series": SERIES, "lags": 1, **ROUTES[route],
                                        "start": "2024-01-01", "frequency": freq})
    body = _assert_problem(response, 422, "frequency")
    assert "finer than a day" in body["detail"]
    assert client.get("/v1/models").json()["data"] == []


def test_hourly_csv_is_refused(client):
    text = "time,a,b\n" + "".join(
        f"2024-01-01 {h:02d}:00,{SERIES['a'][h]},{SERIES['b'][h]}\n" for h in range(24))
    response = client.post("/v1/forecasts", content=text,
                           headers={"content-type": "text/csv"}, params={"lags": 1})
    assert response.status_code == 422
    assert "finer than a day" in response.json()["detail"]


# ---------------------------------------------------------------- one way to read a body

BODY = ('{"series": {"a": [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12.5], '
        '"b": [3, 1, 4, 1, 5, 9, 2, 6, 5, 3, 5, 8]}')


def _json_routes(client) -> dict[str, tuple[str, str]]:
    """Every route with a JSON body: (path, a valid body without its closing brace)."""
    mid = client.post("/v1/models", content=BODY + ', "lags": 1}',
                      headers={"content-type": "application/json"}).json()["id"]
    item = '"items": [{"series": "a", "on_hand": 1, "service_level": 0.9}]'
    return {
        "one-shot forecast": ("/v1/forecasts", BODY + ', "lags": 1, "horizon": 2, "draws": 50'),
        "model": ("/v1/models", BODY + ', "lags": 1'),
        "backtest": ("/v1/backtests", BODY + ', "lags": 1, "origins": 1, "horizon": 1'),
        "stored forecast": (f"/v1/models/{mid}/forecasts", '{"horizon": 2, "draws": 50'),
        "observations": (f"/v1/models/{mid}/observations", '{"series": {"a": [13], "b": [7]}'),
        "scenario": (f"/v1/models/{mid}/scenarios",
                     '{"horizon": 2, "draws": 50, "conditions": [{"series": "a", "step": 1, '
                     '"value": 12}]'),
        "replenishment": (f"/v1/models/{mid}/replenishment", '{"lead_time": 2, ' + item),
    }


def test_every_json_route_reads_its_body_the_same_way(client):
    for label, (path, body) in _json_routes(client).items():
        ok = client.post(path, content=b"\xef\xbb\xbf" + (body + "}").encode(),
                         headers={"content-type": "application/json"})
        assert ok.status_code in (200, 201, 202), (label, ok.text)  # byte-order mark ignored
        broken = client.post(path, content=body, headers={"content-type": "application/json"})
        assert broken.status_code == 400, (label, broken.text)  # malformed: 400 everywhere
        assert broken.headers["content-type"].startswith(PROBLEM)
        assert "not valid JSON" in broken.json()["detail"]
        xml = client.post(path, content=body + "}", headers={"content-type": "application/xml"})
        assert xml.status_code == 415, (label, xml.text)
        twice = client.post(path, content=body + ', "draws": 60}',
                            headers={"content-type": "application/json"})
        if '"draws"' in body:
            _assert_problem(twice, 422, "draws")  # a key twice: refused, not "last wins"


def test_openapi_lists_400_and_415_on_every_route_with_a_body(client):
    paths = client.get("/openapi.json").json()["paths"]
    for path, operations in paths.items():
        for method, operation in operations.items():
            if "requestBody" in operation:
                assert {"400", "415"} <= set(operation["responses"]), (method, path)


def test_an_empty_replenishment_item_is_refused(client):
    mid = client.post("/v1/models", json={"series": SERIES, "lags": 1}).json()["id"]
    answer = client.post(f"/v1/models/{mid}/replenishment", json={
        "lead_time": 2, "items": [{"series": [], "on_hand": 1, "service_level": 0.9}]})
    assert answer.status_code == 422  # was 200 with a reorder point of 0
    assert any(e["field"].startswith("items.0.series") for e in answer.json()["errors"])


def test_fan_chart_history_zero_means_no_history(client):
    mid = client.post("/v1/models", json={"series": SERIES, "lags": 1}).json()["id"]
    chart = client.get(f"/v1/models/{mid}/fan-chart", params={"history": 0}).json()
    assert chart["history"]["dates"] == []  # was the whole history
    assert all(v == [] for v in chart["history"]["values"].values())
    some = client.get(f"/v1/models/{mid}/fan-chart", params={"history": 3}).json()
    assert len(some["history"]["dates"]) == 3


def test_a_backtest_with_an_irregular_last_date_is_refused_like_a_forecast(client):
    dates = _monthly(2018)
    dates[-1] = "2020-06-17"  # not the month start the others follow
    body = {"series": SERIES, "lags": 1, "dates": dates}
    forecast = client.post("/v1/forecasts", json={**body, **OUTPUT})
    backtest = client.post("/v1/backtests", json={**body, **OUTPUT, "origins": 2})
    assert forecast.status_code == backtest.status_code == 422
    assert backtest.json()["type"] == forecast.json()["type"]
