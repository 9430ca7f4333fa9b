"""Fixtures for the browser tests: a real server on a free loopback port and Debian's
Chromium driven by Playwright (headless, launched by path: no browser download).

Without Chromium the tests are skipped with the reason, unless
``FANFOLD_TEST_REQUIRE_BROWSER=1`` (set by ``.ci/run``), where they fail instead.
Screenshots go to ``tests/artifacts/browser/`` (git-ignored).
"""

from __future__ import annotations

import os
import re
import shutil
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest

ARTIFACTS = Path(__file__).resolve().parents[1] / "artifacts" / "browser"
DEMO_CSV = Path(__file__).resolve().parents[2] / "service" / "demo" / "bike_parts_demand.csv"
CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]


def _chromium() -> str | None:
    for candidate in (os.environ.get("FANFOLD_CHROMIUM"), "/usr/bin/chromium",
                      shutil.which("chromium")):
        if candidate and Path(candidate).exists():
            return candidate
    return None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="session")
def chromium_path() -> str:
    path = _chromium()
    if path is None:
        reason = ("no Chromium at /usr/bin/chromium (apt-get install chromium, or set "
                  "FANFOLD_CHROMIUM)")
        if os.environ.get("FANFOLD_TEST_REQUIRE_BROWSER") == "1":
            pytest.fail(f"browser tests are required here but {reason}")
        pytest.skip(reason)
    return path


def _serve(folder: Path, extra_env: dict[str, str] | None = None) -> Iterator[str]:
    """``fanfold serve`` on a free loopback port with a fresh SQLite file; its URL."""
    port = _free_port()
    env = {k: v for k, v in os.environ.items() if not k.startswith("FANFOLD_")}
    env.update(FANFOLD_DATABASE_URL=f"sqlite:///{folder / 'fanfold.db'}",
               FANFOLD_BLAS_THREADS="1", **(extra_env or {}))
    log = (folder / "server.log").open("wb")
    proc = subprocess.Popen([sys.executable, "-m", "service", "serve", "--port", str(port)],
                            env=env, stdout=log, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 90
        while True:
            if proc.poll() is not None:
                raise AssertionError((folder / "server.log").read_text())
            try:
                if httpx.get(f"{url}/readyz", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if time.monotonic() > deadline:
                raise AssertionError("the server was not ready within 90 s")
            time.sleep(0.2)
        yield url
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=25)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()


@pytest.fixture(scope="session")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """A keyless server, as on a planner's own machine (loopback)."""
    yield from _serve(tmp_path_factory.mktemp("server"))


@pytest.fixture(scope="session")
def keyed_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, str]]:
    """A server that needs an API key and runs every sampled fit as a job: (url, key)."""
    from service.auth import new_key

    key, entry = new_key("planner", "acme")
    env = {"FANFOLD_API_KEYS": f"[{entry.model_dump_json()}]",
           "FANFOLD_SYNC_MAX_GIBBS_WORK": "1000"}
    for url in _serve(tmp_path_factory.mktemp("keyed"), env):
        yield url, key


@pytest.fixture(scope="session")
def browser(chromium_path: str) -> Iterator[object]:
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        chromium = pw.chromium.launch(executable_path=chromium_path, args=CHROMIUM_ARGS,
                                      headless=True)
        try:
            yield chromium
        finally:
            chromium.close()


@pytest.fixture
def page(browser: object, server: str) -> Iterator[object]:
    """A fresh page at 1280x800 on the keyless server."""
    yield from _page(browser, server)


@pytest.fixture
def keyed_page(browser: object, keyed_server: tuple[str, str]) -> Iterator[object]:
    """A fresh page at 1280x800 on the server that needs a key."""
    yield from _page(browser, keyed_server[0])


def _page(browser: object, url: str) -> Iterator[object]:
    """A fresh page at 1280x800; fails the test on any console error (a script error, a
    Content-Security-Policy violation)."""
    context = browser.new_context(viewport={"width": 1280, "height": 800},  # type: ignore[attr-defined]
                                  accept_downloads=True, base_url=url)
    page = context.new_page()
    errors: list[str] = []
    # answers the page explains (401 without a key, 422 for data the server refuses) are
    # logged by the browser too; anything else is a fault
    expected = re.compile(r"Failed to load resource: .* status of (401|422)")
    page.on("console", lambda m: errors.append(m.text)
            if m.type == "error" and not expected.match(m.text) else None)
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.set_default_timeout(30_000)
    try:
        yield page
        assert errors == [], errors
    finally:
        context.close()


@pytest.fixture(scope="session")
def artifacts() -> Path:
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    return ARTIFACTS
