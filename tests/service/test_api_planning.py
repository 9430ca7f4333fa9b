"""Planning endpoints: scenarios, impulse responses, variance shares, replenishment, and
ragged-edge data through the API. The numerics are checked against references in
tests/priors; here the HTTP layer must give the engine's answers, validate, and cache."""

from __future__ import annotations

import math

import numpy as np
import pytest

from priors import FanfoldVAR


def _body(frame):
    return {"series": {c: [None if math.isnan(v) else float(v) for v in frame[c]]
                       for c in frame},
            "start": frame.index[0].date().isoformat(), "frequency": "MS"}


@pytest.fixture
def part(demo):
    return demo.iloc[:60][["tyres", "inner_tubes", "brake_pads"]]


@pytest.fixture
def model_id(client, part):
    r = client.post("/v1/models", json={**_body(part), "lags": 2})
    assert r.status_code == 201, r.text
    return r.json()["id"]


def test_scenario_fixes_values_and_reports_their_percentiles(client, model_id, part):
    body = {"horizon": 4, "draws": 400, "seed": 3, "quantiles": [0.1, 0.9],
            "conditions": [{"series": "tyres", "step": 1, "value": 1500},
                           {"series": "brake_pads", "date": "2021-03-01",
                            "lower": 700, "upper": 760}]}
    r = client.post(f"/v1/models/{model_id}/scenarios", json=body)
    assert r.status_code == 200, r.text
    out = r.json()
    assert set(out) == {"forecasts", "baseline", "conditions", "ranges_probability",
                        "known_periods", "sweeps", "seed", "draws", "horizon", "cumulative",
                        "lead_time_totals"}
    tyres = out["forecasts"]["tyres"]
    assert tyres["dates"][0] == "2021-01-01"
    assert tyres["mean"][0] == pytest.approx(1500) and tyres["quantiles"]["0.1"][0] == \
        pytest.approx(1500)
    pads = out["forecasts"]["brake_pads"]
    assert 700 - 1e-6 <= pads["quantiles"]["0.1"][2] <= pads["quantiles"]["0.9"][2] <= 760 + 1e-6
    kinds = [(c["series"], c["kind"], c["step"]) for c in out["conditions"]]
    assert kinds == [("tyres", "value", 1), ("brake_pads", "range", 3)]
    assert all(0 <= c["prior_probability"] <= 1 for c in out["conditions"])
    # the same as the engine with the same seed
    model = FanfoldVAR(lags=2).fit(part)
    sc = model.scenario(4, [model.condition("tyres", 1, value=1500),
                            model.condition("brake_pads", 3, lower=700, upper=760)],
                        rng=np.random.default_rng(3), draws=400)
    np.testing.assert_allclose(out["forecasts"]["inner_tubes"]["mean"],
                               sc.forecast.mean()[:, 1], rtol=1e-9)
    np.testing.assert_allclose(out["baseline"]["inner_tubes"]["mean"],
                               sc.baseline.mean()[:, 1], rtol=1e-9)


@pytest.mark.parametrize("condition, needle", [
    ({"series": "chains", "step": 1, "value": 5}, "unknown series"),
    ({"series": "tyres", "step": 9, "value": 5}, "outside the forecast horizon"),
    ({"series": "tyres", "date": "2030-01-01", "value": 5}, "not a forecast period"),
    ({"series": "tyres", "step": 1, "lower": 9, "upper": 5}, "above upper"),
    ({"series": "tyres", "step": 1, "value": 5, "lower": 1}, "not both"),
    ({"series": "tyres", "value": 5}, "either step or date"),
])
def test_bad_conditions_are_422_problems_naming_the_fault(client, model_id, condition, needle):
    r = client.post(f"/v1/models/{model_id}/scenarios",
                    json={"horizon": 4, "draws": 50, "conditions": [condition]})
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    assert needle in r.text


def test_scenario_lead_time_totals_follow_the_plan(client, model_id):
    body = {"horizon": 3, "draws": 300, "seed": 3, "lead_time": 2,
            "conditions": [{"series": "tyres", "step": 1, "value": 1500},
                           {"series": "tyres", "step": 2, "value": 1600}]}
    out = client.post(f"/v1/models/{model_id}/scenarios", json=body).json()
    assert out["lead_time_totals"]["tyres"]["quantiles"]["0.05"] == pytest.approx(3100)
    assert out["lead_time_totals"]["inner_tubes"]["mean"] == pytest.approx(
        sum(out["forecasts"]["inner_tubes"]["mean"][:2]))


def test_impulse_responses_match_the_engine_and_cache_with_etags(client, model_id, part):
    url = f"/v1/models/{model_id}/impulse-responses"
    query = {"horizon": 6, "draws": 200, "ordering": "brake_pads,tyres,inner_tubes",
             "bands": "68,90"}
    r = client.get(url, params=query)
    assert r.status_code == 200, r.text
    out = r.json()
    assert out["steps"] == list(range(7)) and out["units"]["tyres"] == "units"
    resp = out["responses"]["tyres"]["inner_tubes"]
    assert set(resp["bands"]) == {"68", "90"}
    lo68, hi68 = resp["bands"]["68"]["lower"], resp["bands"]["68"]["upper"]
    lo90, hi90 = resp["bands"]["90"]["lower"], resp["bands"]["90"]["upper"]
    assert all(a <= b <= m <= c <= d for a, b, m, c, d in
               zip(lo90, lo68, resp["median"], hi68, hi90, strict=True))
    model = FanfoldVAR(lags=2).fit(part)
    ref = model.impulse_responses(6, rng=np.random.default_rng(0), draws=200,
                                  ordering=["brake_pads", "tyres", "inner_tubes"])
    np.testing.assert_allclose(resp["median"], ref.median()[:, 1, 0], rtol=1e-9)
    # brake pads first in the ordering: no other shock moves them on impact
    assert out["responses"]["tyres"]["brake_pads"]["median"][0] == 0.0
    again = client.get(url, params=query, headers={"If-None-Match": r.headers["etag"]})
    assert again.status_code == 304
    other = client.get(url, params={**query, "cumulative": "true"},
                       headers={"If-None-Match": r.headers["etag"]})
    assert other.status_code == 200 and other.headers["etag"] != r.headers["etag"]


def test_generalised_responses_refuse_an_ordering(client, model_id):
    r = client.get(f"/v1/models/{model_id}/impulse-responses",
                   params={"identification": "generalised", "ordering": "tyres"})
    assert r.status_code == 422 and "recursive" in r.json()["detail"]
    r = client.get(f"/v1/models/{model_id}/impulse-responses",
                   params={"ordering": "tyres,tyres,brake_pads", "draws": 10})
    assert r.status_code == 422 and "exactly once" in r.json()["detail"]


def test_variance_shares_sum_to_one(client, model_id):
    r = client.get(f"/v1/models/{model_id}/variance-decomposition",
                   params={"horizon": 5, "draws": 200, "identification": "generalised"})
    assert r.status_code == 200, r.text
    out = r.json()
    assert out["steps"] == [1, 2, 3, 4, 5]
    for series, by_shock in out["shares"].items():
        # medians need not sum to 1 exactly, but stay close for a well-identified model
        total = np.sum([v["median"] for v in by_shock.values()], axis=0)
        assert np.all(np.abs(total - 1) < 0.1), series


def test_replenishment_advice_and_alerts(client, model_id, part):
    body = {"lead_time": 3, "draws": 2000, "seed": 5,
            "items": [{"series": "tyres", "on_hand": 2000, "on_order": 500,
                       "service_level": 0.95},
                      {"series": ["tyres", "inner_tubes"], "name": "tyre kit",
                       "on_hand": 4000, "fill_rate": 0.98, "order_quantity": 1000}],
            "alerts": [{"series": "brake_pads", "threshold": 900},
                       {"series": "tyres", "threshold": 900, "below": True}]}
    r = client.post(f"/v1/models/{model_id}/replenishment", json=body)
    assert r.status_code == 200, r.text
    out = r.json()
    assert out["window"] == {"first": "2021-01-01", "last": "2021-03-01", "steps": 3,
                             "lead_time": 3, "review_period": 0}
    tyres, kit = out["items"]
    assert tyres["name"] == "tyres" and kit["name"] == "tyre kit"
    # demand in whole units (the demo's counts): the 0.95 quantile rounded up
    assert tyres["reorder_point"] == math.ceil(tyres["demand_quantiles"]["0.95"] - 1e-9)
    assert tyres["cycle_service_level"] >= 0.95
    assert tyres["inventory_position"] == 2500
    assert tyres["suggested_order"] == pytest.approx(max(0, tyres["reorder_point"] - 2500))
    # whole units: the reorder point rounded up, so the fill rate reached is at least 0.98
    assert 0.98 <= kit["fill_rate"] < 0.99 and kit["suggested_order"] % 1000 == 0
    # the engine: the kit's demand is the per-path sum of its two series
    model = FanfoldVAR(lags=2).fit(part)
    fc = model.forecast(3, rng=np.random.default_rng(5), draws=2000)
    assert kit["mean_demand"] == pytest.approx(fc.paths[:, :, :2].sum(axis=(1, 2)).mean())
    later = client.post(f"/v1/models/{model_id}/replenishment",
                        json={**body, "start": 4, "review_period": 1}).json()
    assert later["window"]["first"] == "2021-04-01" and later["window"]["steps"] == 4
    pads, low = out["alerts"]
    assert len(pads["probability"]) == 3 and pads["any_step"] >= max(pads["probability"])
    assert low["below"] is True
    np.testing.assert_allclose(pads["probability"], np.mean(fc.paths[:, :, 2] > 900, axis=0))


@pytest.mark.parametrize("item, needle", [
    ({"series": "tyres", "on_hand": 1}, "exactly one of service_level and fill_rate"),
    ({"series": "tyres", "on_hand": 1, "fill_rate": 0.9}, "order_quantity"),
    ({"series": "tyres", "on_hand": -1, "service_level": 0.9}, "on_hand"),
    ({"series": "spokes", "on_hand": 1, "service_level": 0.9}, "unknown series"),
])
def test_bad_replenishment_items_are_422(client, model_id, item, needle):
    r = client.post(f"/v1/models/{model_id}/replenishment",
                    json={"lead_time": 2, "draws": 100, "items": [item]})
    assert r.status_code == 422 and needle in r.text


def test_one_shot_forecast_reports_lead_time_totals(client, demo_body):
    r = client.post("/v1/forecasts", json={**demo_body, "lead_time": 3})
    assert r.status_code == 200, r.text
    out = r.json()
    totals = out["lead_time_totals"]["tyres"]
    means = out["forecasts"]["tyres"]["mean"]
    assert totals["mean"] == pytest.approx(sum(means[:3]))  # means add; quantiles do not
    assert set(totals["quantiles"]) == {"0.05", "0.5", "0.95"}
    r = client.post("/v1/forecasts", json={**demo_body, "lead_time": 9})
    assert r.status_code == 422 and "longer than the horizon" in r.text


def test_ragged_edge_through_the_api(client, demo):
    # inner tubes not yet reported for the last month: the model fits on the complete
    # rows and the forecast starts at the incomplete month, keeping the known tyres value
    frame = demo.iloc[:60][["tyres", "inner_tubes"]].copy()
    frame.iloc[-1, 1] = np.nan
    r = client.post("/v1/models", json={**_body(frame), "lags": 2})
    assert r.status_code == 201, r.text
    model = r.json()
    assert model["span"]["end"] == frame.index[-2].date().isoformat()
    fc = client.post(f"/v1/models/{model['id']}/forecasts",
                     json={"horizon": 2, "draws": 200, "seed": 1}).json()
    assert fc["forecasts"]["tyres"]["dates"][0] == frame.index[-1].date().isoformat()
    assert fc["horizon"] == 3
    assert fc["forecasts"]["tyres"]["quantiles"]["0.05"][0] == pytest.approx(frame.iloc[-1, 0])
    sc = client.post(f"/v1/models/{model['id']}/scenarios",
                     json={"horizon": 2, "draws": 100, "seed": 1, "conditions": []}).json()
    assert sc["known_periods"] == 1 and sc["conditions"][0]["kind"] == "known"
    # the completed month arrives: it replaces the incomplete row
    done = demo.iloc[59:62][["tyres", "inner_tubes"]]
    r = client.post(f"/v1/models/{model['id']}/observations", json=_body(done))
    assert r.status_code == 200, r.text
    assert r.json()["span"]["end"] == done.index[-1].date().isoformat()
    # a gap inside the data is still an error naming the cell
    holed = demo.iloc[:60][["tyres", "inner_tubes"]].copy()
    holed.iloc[30, 0] = np.nan
    r = client.post("/v1/models", json={**_body(holed), "lags": 2})
    assert r.status_code == 422 and "inside the estimation window" in r.json()["detail"]


def test_planning_endpoints_404_for_unknown_models(client):
    missing = "/v1/models/00000000-0000-4000-8000-000000000000"
    assert client.post(f"{missing}/scenarios", json={"conditions": []}).status_code == 404
    assert client.get(f"{missing}/impulse-responses").status_code == 404
    assert client.get(f"{missing}/variance-decomposition").status_code == 404
    assert client.post(f"{missing}/replenishment",
                       json={"lead_time": 1, "alerts": [{"series": "x", "threshold": 1}]}
                       ).status_code == 404
