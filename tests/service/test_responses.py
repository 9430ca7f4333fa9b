"""The JSON body writer of every route (service.responses)."""

from __future__ import annotations

import json
import math

from starlette.responses import JSONResponse as StarletteJSON

from service.responses import JSONResponse

PAYLOAD = {
    "forecasts": {"tyres": {"dates": ["2026-01-01"], "mean": [123.456789, 1e-05, 1e20],
                            "quantiles": {"0.05": [-0.0, 5e-324, 1.7976931348623157e308]}},
                  "pédales ✓": {"mean": [None, 0.1 + 0.2, 2.5]}},
    "lags": 4, "seed": 4294967295, "nested": [[1, 2.0], [], {}], "flag": True, "none": None,
}


def test_body_is_the_json_starlette_writes():
    # Reference: Starlette's own JSONResponse (json.dumps, compact, UTF-8)
    ours, ref = JSONResponse(PAYLOAD).body, StarletteJSON(PAYLOAD).body
    assert json.loads(ours) == json.loads(ref)
    assert b" " not in ours.replace(b"\xe2\x9c\x93", b"").replace("pédales ".encode(), b"")
    assert "pédales ✓".encode() in ours  # raw UTF-8, as ensure_ascii=False
    # every float survives the round trip bit for bit
    for a, b in zip(json.loads(ours)["forecasts"]["tyres"]["mean"], PAYLOAD["forecasts"][
            "tyres"]["mean"], strict=True):
        assert a == b and math.copysign(1, a) == math.copysign(1, b)


def test_media_type_status_and_length_are_kept():
    r = JSONResponse({"a": 1}, status_code=201, media_type="application/problem+json")
    assert r.status_code == 201
    assert r.headers["content-type"] == "application/problem+json"
    assert r.headers["content-length"] == str(len(r.body))


def test_non_finite_numbers_become_null():
    assert json.loads(JSONResponse({"x": [math.nan, math.inf, 1.0]}).body) == {
        "x": [None, None, 1.0]}
