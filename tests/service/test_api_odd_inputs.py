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
