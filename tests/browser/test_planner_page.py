"""The planner page in a real browser: load the demo CSV, fit, read the fan charts, set a
plan, get reorder advice, download the quantiles and compare them with the API; bad
files show plain messages and store nothing. Screenshots: tests/artifacts/browser/."""

from __future__ import annotations

import csv
import io
import json
import re
import shutil
import subprocess
from pathlib import Path

import httpx
import pytest

from .conftest import DEMO_CSV

NAMES = ["tyres", "inner_tubes", "brake_pads", "chains", "cassettes"]


def _fit_demo(page, *, horizon: int = 6, seed: int = 123, shot: Path | None = None) -> None:
    page.goto("/")
    page.get_by_label("CSV file").set_input_files(str(DEMO_CSV))
    page.get_by_role("button", name="Fit and forecast").wait_for()
    page.get_by_label("Periods to forecast").fill(str(horizon))
    page.get_by_text("More prior settings").click()
    page.get_by_label("Random seed").fill(str(seed))
    page.get_by_label("Simulated paths").fill("1000")
    if shot is not None:
        page.screenshot(path=shot, full_page=False)
    page.get_by_role("button", name="Fit and forecast").click()
    page.locator("#fan-charts canvas").nth(len(NAMES) - 1).wait_for()


def _table(page) -> list[list[str]]:
    rows = page.locator("#quantile-table tbody tr")
    return [rows.nth(i).locator("th, td").all_inner_texts() for i in range(rows.count())]


def _model_id(page) -> str:
    return page.locator("#forecast-panel").get_attribute("data-model-id")


def test_demo_fit_plan_reorder_and_download(page, server, artifacts: Path):
    _fit_demo(page, shot=artifacts / "1-data-and-settings.png")
    page.screenshot(path=artifacts / "2-forecast-top-1280.png", full_page=False)
    # a fan chart per series, with the series' name and a description for screen readers
    cards = page.locator("#fan-charts figure")
    assert cards.count() == len(NAMES)
    assert cards.locator("h3").all_inner_texts() == NAMES
    label = cards.first.locator("canvas").get_attribute("aria-label")
    assert label.startswith("Fan chart of tyres") and "95% band" in label
    assert "sound" in page.locator("#fit-note").inner_text() or page.locator(
        "#fit-note").inner_text()
    page.screenshot(path=artifacts / "2-whole-page-1280.png", full_page=True)

    # the quantile table: one row per forecast month, median inside the 5-95% range
    page.get_by_label("Quantiles of").select_option("inner_tubes")
    before = _table(page)
    assert len(before) == 6 and re.fullmatch(r"\d{4}-\d{2}-\d{2}", before[0][0])

    # the downloaded CSV equals the API's answer for the same seed
    model_id = _model_id(page)
    with page.expect_download() as info:
        page.get_by_role("button", name="Download quantiles (CSV)").click()
    rows = list(csv.DictReader(io.StringIO(Path(info.value.path()).read_text())))
    api = httpx.post(f"{server}/v1/models/{model_id}/forecasts", timeout=60, json={
        "horizon": 6, "seed": 123, "draws": 1000, "reject_explosive": True,
        "quantiles": [0.025, 0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95, 0.975]}).json()
    assert len(rows) == 6 * len(NAMES)
    for row in rows:
        f = api["forecasts"][row["series"]]
        i = f["dates"].index(row["date"])
        assert float(row["mean"]) == f["mean"][i]
        for key, values in f["quantiles"].items():
            assert float(row[f"q{key}"]) == values[i]

    # a plan for tyres moves the other series' numbers
    page.get_by_label("Series", exact=True).select_option("tyres")
    page.get_by_label("plan for", exact=False).first.wait_for()
    for i in range(1, 4):
        page.locator(f"#plan-{i}").fill("1500")
    page.get_by_role("button", name="Show this plan").click()
    page.locator("#scenario-banner").wait_for()
    assert "tyres" in page.locator("#scenario-banner").inner_text()
    assert page.locator("figure.conditioned h3").inner_text() == "tyres (your plan)"
    page.get_by_label("Quantiles of").select_option("inner_tubes")
    after = _table(page)
    assert after != before and [r[0] for r in after] == [r[0] for r in before]
    assert page.locator("#scenario-note").inner_text()
    page.locator("#fan-charts").scroll_into_view_if_needed()
    page.screenshot(path=artifacts / "3-plan-1280.png", full_page=False)

    # reorder advice for brake pads
    page.get_by_label("Item").select_option("brake_pads")
    page.get_by_label("Lead time").fill("2")
    page.get_by_label("Service level").fill("95")
    page.get_by_label("On hand").fill("500")
    page.get_by_label("On order").fill("300")
    page.get_by_role("button", name="Work out the reorder point").click()
    result = page.locator("#reorder-result")
    result.wait_for()
    text = result.inner_text()
    for term in ("Reorder point", "Safety stock", "stock-out"):
        assert term in text
    page.locator("#reorder-panel").scroll_into_view_if_needed()
    page.screenshot(path=artifacts / "4-reorder-1280.png", full_page=False)

    # the curl command repeats the request shown: its answer has the table's numbers
    curl = page.locator("#curl-text").input_value()
    assert curl.startswith("curl -sS -X POST") and f"/v1/models/{model_id}/scenarios" in curl
    if shutil.which("curl"):
        done = subprocess.run(["bash", "-c", curl], capture_output=True, text=True, timeout=60)
        answer = json.loads(done.stdout)
        medians = answer["forecasts"]["inner_tubes"]["median"]
        shown = [float(row[6].replace(",", "")) for row in after]  # the median column
        assert shown == [round(v, 1) for v in medians]
        assert [c["lower"] for c in answer["conditions"]] == [1500.0] * 3

    # the chart as SVG from the server
    with page.expect_download() as info:
        page.get_by_role("button", name="Download charts (SVG)").click()
    assert Path(info.value.path()).read_bytes().lstrip().startswith(b"<?xml")


def test_tablet_width_and_keyboard(page, artifacts: Path):
    page.set_viewport_size({"width": 768, "height": 1024})
    page.goto("/")
    # keyboard: the first Tab reaches the skip link; the demo data loads with Enter
    page.keyboard.press("Tab")
    assert page.evaluate("document.activeElement.className") == "skip"
    page.get_by_role("button", name="Use the bicycle-parts demo data").focus()
    page.keyboard.press("Enter")
    page.locator("#settings-panel").wait_for()
    assert page.locator("#column-list li").count() == len(NAMES)
    _fit_demo(page, horizon=4, seed=5)
    widths = page.evaluate("[document.documentElement.scrollWidth, window.innerWidth]")
    assert widths[0] <= widths[1]  # nothing wider than the screen
    page.screenshot(path=artifacts / "5-forecast-tablet.png", full_page=True)
    # every control shown has a label (or is a button with words on it)
    unlabelled = page.evaluate("""[...document.querySelectorAll('input, select, textarea, button')]
        .filter(e => !e.closest('[hidden]'))
        .filter(e => !(e.labels && e.labels.length) && !e.getAttribute('aria-label')
                     && !(e.tagName === 'BUTTON' && e.innerText.trim()))
        .map(e => e.id || e.outerHTML)""")
    assert unlabelled == []


@pytest.mark.parametrize(("name", "text", "message"), [
    ("text-in-numbers", "date,tyres,chains\n2020-01-01,10,5\n2020-02-01,n/a,6\n"
                        "2020-03-01,12,7\n2020-04-01,13,8\n",
     '"tyres" has text in row 3 (2020-02-01): "n/a"'),
    ("missing-date", "date,tyres,chains\n2020-01-01,10,5\n,11,6\n2020-03-01,12,7\n"
                     "2020-04-01,13,8\n", "Row 3 has no date."),
    ("single-row", "date,tyres,chains\n2020-01-01,10,5\n",
     "The file has 1 row of data below the names; a forecast needs at least 3 periods"),
])
def test_a_bad_file_is_explained_and_nothing_is_stored(page, server, artifacts, tmp_path,
                                                       name, text, message):
    path = tmp_path / f"{name}.csv"
    path.write_text(text)
    stored = httpx.get(f"{server}/v1/models?limit=100", timeout=10).json()["data"]
    page.goto("/")
    page.get_by_label("CSV file").set_input_files(str(path))
    problems = page.locator("#data-panel")
    problems.get_by_text(message, exact=False).first.wait_for()
    assert page.locator("#settings-panel").is_hidden()
    assert page.locator("#data-problems").is_visible()
    page.screenshot(path=artifacts / f"6-bad-{name}.png", full_page=False)
    assert httpx.get(f"{server}/v1/models?limit=100", timeout=10).json()["data"] == stored


def test_a_file_the_server_refuses_is_explained_and_nothing_is_stored(page, server, tmp_path):
    """The page's checks pass but the model cannot be fitted (a series that never
    changes): the server's problem is shown in words next to the button."""
    rows = "".join(f"2020-{m:02d}-01,{10 + m % 3},5\n" for m in range(1, 13))
    path = tmp_path / "constant.csv"
    path.write_text("date,tyres,chains\n" + rows)
    stored = httpx.get(f"{server}/v1/models?limit=100", timeout=10).json()["data"]
    page.goto("/")
    page.get_by_label("CSV file").set_input_files(str(path))
    page.get_by_role("button", name="Fit and forecast").click()
    problems = page.locator("#fit-problems")
    problems.wait_for()
    assert "chains" in problems.inner_text()
    assert page.locator("#forecast-panel").is_hidden()
    assert httpx.get(f"{server}/v1/models?limit=100", timeout=10).json()["data"] == stored


def test_with_an_api_key_and_a_background_fit(keyed_page, keyed_server, artifacts):
    page, (url, key) = keyed_page, keyed_server
    page.goto("/")
    page.get_by_role("button", name="Use the bicycle-parts demo data").click()
    page.get_by_role("button", name="Fit and forecast").click()
    page.locator("#fit-problems").get_by_text("needs an API key").wait_for()
    page.get_by_text("API key", exact=True).click()
    page.get_by_label("API key").fill(key)
    page.get_by_label("API key").press("Tab")
    page.get_by_label("Periods to forecast").fill("3")
    page.get_by_text("More prior settings").click()
    page.get_by_label("Prior").select_option("independent")
    page.get_by_label("Simulated paths").fill("500")
    page.get_by_role("button", name="Fit and forecast").click()
    page.locator("#fan-charts canvas").nth(4).wait_for(timeout=90_000)
    assert "fitted as a background job" in page.locator("#status").inner_text()
    assert key not in page.url
    assert page.evaluate("sessionStorage.getItem('fanfold.apiKey')") == key
    page.screenshot(path=artifacts / "7-keyed-background-fit.png", full_page=False)
    models = httpx.get(f"{url}/v1/models", headers={"X-API-Key": key}, timeout=10).json()
    assert len(models["data"]) == 1
