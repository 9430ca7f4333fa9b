"""Fan charts as images: GET /v1/models/{id}/fan-chart.svg and .png, and the shared
look of service/output/charts.py (the same colours as the planner page's charts.js)."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from service.output.charts import (
    BAND_SHADES,
    HISTORY_COLOUR,
    MEDIAN_COLOUR,
    ORIGIN_COLOUR,
    band_colours,
    fan_figure,
    panels_from_chart,
)

CHARTS_JS = Path(__file__).resolve().parents[3] / "service" / "static" / "app" / "js" / "charts.js"


@pytest.fixture
def model_id(client, demo_body):
    body = {k: v for k, v in demo_body.items() if k not in ("horizon", "draws", "seed")}
    r = client.post("/v1/models", json={**body, "name": "bike parts"})
    assert r.status_code == 201, r.text
    return r.json()["id"]


def test_svg_fan_chart_names_every_series_and_band_and_gives_304(client, model_id):
    url = f"/v1/models/{model_id}/fan-chart.svg?horizon=4&draws=300&history=12"
    r = client.get(url)
    assert r.status_code == 200, r.text
    assert r.headers["content-type"] == "image/svg+xml"
    svg = r.text
    assert svg.lstrip().startswith("<?xml") and "<svg" in svg
    # text is drawn as glyph paths; the labels stay readable in the glyph ids' comments
    assert r.headers["etag"].startswith('W/"') and r.headers["cache-control"] == "private, no-cache"
    again = client.get(url, headers={"If-None-Match": r.headers["etag"]})
    assert again.status_code == 304 and again.content == b""
    png = client.get(url.replace(".svg", ".png"))
    assert png.status_code == 200 and png.headers["content-type"] == "image/png"
    assert png.content[:8] == b"\x89PNG\r\n\x1a\n"
    assert png.headers["etag"] != r.headers["etag"]


def test_image_series_subset_and_bad_queries(client, model_id):
    one = client.get(f"/v1/models/{model_id}/fan-chart.png?series=tyres&draws=200&horizon=3")
    both = client.get(f"/v1/models/{model_id}/fan-chart.png?draws=200&horizon=3")
    assert one.status_code == both.status_code == 200
    assert len(one.content) < len(both.content)
    unknown = client.get(f"/v1/models/{model_id}/fan-chart.svg?series=spokes")
    assert unknown.status_code == 422
    assert unknown.headers["content-type"] == "application/problem+json"
    assert "spokes" in unknown.json()["detail"]
    assert client.get(f"/v1/models/{model_id}/fan-chart.svg?bands=150").status_code == 422
    missing = client.get("/v1/models/00000000-0000-4000-8000-000000000000/fan-chart.svg")
    assert missing.status_code == 404


def test_the_chart_from_the_json_answer_has_the_shared_look(client, model_id):
    chart = client.get(f"/v1/models/{model_id}/fan-chart?horizon=4&draws=300&history=12").json()
    panels = panels_from_chart(chart)
    assert [p.name for p in panels] == ["tyres", "inner_tubes", "brake_pads"]
    assert np.issubdtype(panels[0].x.dtype, np.datetime64)
    fig = fan_figure(panels, title="t")
    ax = fig.axes[0]
    assert ax.get_ylabel() == "tyres (units)"
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert labels == ["history", "forecast origin", "95% band", "80% band", "50% band",
                      "median"]
    origin = next(line for line in ax.get_lines() if line.get_label() == "forecast origin")
    assert origin.get_linestyle() == "--"
    assert origin.get_xdata()[0] == panels[0].history_x[-1]  # at the last observation


def test_band_shades_are_one_hue_light_to_dark():
    assert band_colours([50, 80, 95]) == dict(zip([95, 80, 50], BAND_SHADES, strict=True))
    assert list(band_colours([90]).values()) == [BAND_SHADES[1]]
    five = list(band_colours([10, 30, 50, 70, 90]).values())
    assert five[0] == BAND_SHADES[0] and five[-1] == BAND_SHADES[-1] and len(set(five)) == 5

    def lightness(hex_colour: str) -> float:
        r, g, b = (int(hex_colour[i:i + 2], 16) for i in (1, 3, 5))
        return 0.2126 * r + 0.7152 * g + 0.0722 * b

    shades = [*BAND_SHADES, MEDIAN_COLOUR]
    assert [lightness(c) for c in shades] == sorted((lightness(c) for c in shades),
                                                    reverse=True)


def test_the_page_draws_with_the_same_colours():
    js = CHARTS_JS.read_text()
    shades = re.search(r"BAND_SHADES = \[([^\]]*)\]", js).group(1)
    assert re.findall(r'"(#[0-9a-f]{6})"', shades) == list(BAND_SHADES)
    for name, value in (("MEDIAN_COLOUR", MEDIAN_COLOUR), ("HISTORY_COLOUR", HISTORY_COLOUR),
                        ("ORIGIN_COLOUR", ORIGIN_COLOUR)):
        assert f'export const {name} = "{value}";' in js
