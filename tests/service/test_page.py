"""The planner page's files as served: security headers on the page only, no inline
code, every control labelled, the vendored chart library as recorded."""

from __future__ import annotations

import hashlib
import re
from html.parser import HTMLParser
from pathlib import Path

from fastapi.testclient import TestClient

from service.app import create_app
from service.auth import new_key
from service.config import Settings

APP = Path(__file__).resolve().parents[2] / "service" / "static" / "app"


class _Page(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.scripts: list[dict[str, str | None]] = []
        self.controls: list[dict[str, str | None]] = []
        self.label_for: set[str] = set()
        self.inline_handlers: list[str] = []
        self.styles = 0
        self.urls: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        self.inline_handlers += [k for k in a if k.startswith("on")]
        self.urls += [v for k, v in a.items() if k in ("src", "href") and v]
        if "style" in a or tag == "style":
            self.styles += 1
        if tag == "script":
            self.scripts.append(a)
        if tag in ("input", "select", "textarea"):
            self.controls.append(a)
        if tag == "label" and a.get("for"):
            self.label_for.add(a["for"] or "")


def _parsed(html: str) -> _Page:
    page = _Page()
    page.feed(html)
    return page


def test_the_page_and_its_files_are_served_with_a_strict_policy(client):
    page = client.get("/")
    assert page.status_code == 200 and page.headers["content-type"].startswith("text/html")
    csp = page.headers["content-security-policy"]
    assert "script-src 'self'" in csp and "unsafe" not in csp
    assert "frame-ancestors 'none'" in csp and "connect-src 'self'" in csp
    assert page.headers["x-content-type-options"] == "nosniff"
    parsed = _parsed(page.text)
    local = [u for u in parsed.urls if u.startswith("/app/")]
    assert not [u for u in parsed.urls if "://" in u or u.startswith("//")]
    for url in local:
        r = client.get(url)
        assert r.status_code == 200, url
        assert r.headers["content-security-policy"] == csp
    for name in ("api", "charts", "data", "fitting", "loading", "main", "planning", "tables",
                 "view"):
        r = client.get(f"/app/js/{name}.js")
        assert r.status_code == 200 and r.headers["content-type"].startswith("text/javascript")
    demo = client.get("/app/demo.csv")
    assert demo.text.startswith("date,tyres,inner_tubes")
    again = client.get("/", headers={"If-None-Match": page.headers["etag"]})
    assert again.status_code == 304


def test_the_api_keeps_its_own_headers(client):
    r = client.get("/livez")
    assert "content-security-policy" not in r.headers


def test_unknown_files_are_404(client):
    for url in ("/app/nothing.js", "/app/../app.py", "/app/js/", "/app/%2e%2e/config.py"):
        assert client.get(url).status_code == 404, url


def test_no_inline_code_and_every_control_labelled():
    page = _parsed((APP / "index.html").read_text())
    assert page.scripts and all(s.get("src") for s in page.scripts)
    assert page.inline_handlers == [] and page.styles == 0
    unlabelled = [c for c in page.controls
                  if c.get("id") not in page.label_for and not c.get("aria-label")]
    assert unlabelled == []
    for js in (APP / "js").glob("*.js"):
        text = js.read_text()
        assert "innerHTML" not in text and "eval(" not in text, js.name  # no markup from data


def test_the_page_is_open_while_the_api_needs_a_key(tmp_path):
    key, entry = new_key("planner", "acme")
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'k.db'}", api_keys=[entry])
    with TestClient(create_app(settings)) as c:
        assert c.get("/").status_code == 200
        assert c.get("/app/js/api.js").status_code == 200
        assert c.get("/v1/models").status_code == 401
        assert c.get("/v1/models", headers={"X-API-Key": key}).status_code == 200


def test_the_page_can_be_switched_off(tmp_path):
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'off.db'}", page_enabled=False)
    with TestClient(create_app(settings)) as c:
        assert c.get("/").status_code == 404
        assert c.get("/app/app.css").status_code == 404


def test_the_vendored_chart_library_is_as_recorded():
    record = (APP / "vendor" / "VENDORED.md").read_text()
    version = re.search(r"Chart\.js (\d+\.\d+\.\d+)", record).group(1)
    digest = re.search(r"SHA-256 `([0-9a-f]{64})`", record).group(1)
    bundle = (APP / "vendor" / "chart.umd.min.js").read_bytes()
    assert f"Chart.js v{version}".encode() in bundle[:200]
    assert hashlib.sha256(bundle).hexdigest() == digest
    assert "MIT License" in (APP / "vendor" / "chart.js.LICENSE.md").read_text()
