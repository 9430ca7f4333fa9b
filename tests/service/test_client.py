"""service.client against the app in-process (ASGI transport)."""

from __future__ import annotations

import httpx
import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.client import FanfoldAPIError, FanfoldClient
from service.config import Settings


@pytest.fixture
def fanfold():
    """The client over httpx.MockTransport, handing each request to the app in-process."""
    with TestClient(create_app(Settings())) as app:

        def handler(request: httpx.Request) -> httpx.Response:
            r = app.request(request.method, request.url.raw_path.decode(),
                            content=request.content, headers=dict(request.headers))
            return httpx.Response(r.status_code, headers=dict(r.headers), content=r.content)

        with FanfoldClient("http://testserver", transport=httpx.MockTransport(handler)) as c:
            yield c


def test_forecast_table(fanfold, demo):
    table = fanfold.forecast(demo[["tyres", "chains"]], horizon=3, draws=200, seed=2,
                             quantiles=[0.1, 0.9])
    assert list(table.columns) == ["series", "date", "step", "mean", "median", "q0.1", "q0.9"]
    assert len(table) == 2 * 3
    assert (table["q0.1"] <= table["median"]).all() and (table["median"] <= table["q0.9"]).all()
    assert table["date"].iloc[0] == "2026-01-01"


def test_errors_carry_the_problem_document(fanfold, demo):
    with pytest.raises(FanfoldAPIError) as info:
        fanfold.forecast(demo[["tyres"]], horizon=0)
    assert info.value.status == 422
    assert info.value.problem["errors"][0]["field"] == "horizon"
    assert "horizon" in str(info.value)


def test_stored_model_round_trip(fanfold, demo):
    model = fanfold.create_model(demo[["tyres", "chains"]].iloc[:100], lags=1)
    table = fanfold.forecast_model(model["id"], horizon=2, draws=100, seed=1)
    assert list(table["series"].unique()) == ["tyres", "chains"]
    grown = fanfold.append(model["id"], demo[["tyres", "chains"]].iloc[100:-1])
    assert grown["version"] == 2 and grown["span"]["end"] == "2025-11-01"
    # the month that just closed, on its own (was a 422: "at least 3 items")
    grown = fanfold.append(model["id"], demo[["tyres", "chains"]].iloc[-1:])
    assert grown["version"] == 3 and grown["span"]["end"] == "2025-12-01"
    chart = fanfold.fan_chart(model["id"], horizon=3, bands="80")
    assert list(chart["bands"]) == ["80"]
    queued = fanfold.create_model(demo[["tyres", "chains"]], lags=1, background=True, wait=60)
    assert queued["id"] != model["id"]
    fanfold.delete_model(model["id"])
    with pytest.raises(FanfoldAPIError) as info:
        fanfold.forecast_model(model["id"], horizon=2)
    assert info.value.status == 404


def test_planning_calls_return_tables(fanfold, demo):
    part = demo[["tyres", "inner_tubes"]].iloc[:72].copy()
    part.iloc[-1, 1] = float("nan")  # ragged edge: sent as null
    model = fanfold.create_model(part, lags=2)
    table, conds = fanfold.scenario(model["id"], [{"series": "tyres", "step": 2,
                                                   "value": 1400}],
                                    horizon=3, draws=200, seed=1)
    assert list(conds["kind"]) == ["known", "value"]
    fixed = table[(table["series"] == "tyres") & (table["step"] == 2)]
    assert fixed["median"].iloc[0] == pytest.approx(1400)
    assert "baseline_median" in table.columns
    irf = fanfold.impulse_responses(model["id"], horizon=4, draws=100,
                                    ordering=["inner_tubes", "tyres"], cumulative=True)
    assert set(irf.columns) >= {"shock", "response", "step", "median", "lower68", "unit"}
    assert len(irf) == 2 * 2 * 5
    shares = fanfold.variance_decomposition(model["id"], horizon=3, draws=100, bands="90")
    assert set(shares.columns) == {"response", "shock", "step", "median", "lower90",
                                   "upper90"}
    advice = fanfold.replenishment(model["id"], lead_time=2, draws=500, seed=3,
                                   items=[{"series": "tyres", "on_hand": 1000,
                                           "service_level": 0.9}],
                                   alerts=[{"series": "inner_tubes", "threshold": 2500}])
    assert advice["items"]["reorder_point"].iloc[0] > 0
    assert len(advice["alerts"]) == 2
