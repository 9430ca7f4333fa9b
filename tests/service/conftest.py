"""Fixtures for the HTTP tests: an app on default settings, the database it uses, and the
demo data.

Databases. ``database_url`` is a fresh, empty database per test: a SQLite file in the
test's folder, or (in modules marked ``both_databases``, whose tests then run twice, ids
``[sqlite]`` and ``[postgres]``) also a database created on a throw-away PostgreSQL
server, one server per session (:mod:`tests.service.postgres`). Without PostgreSQL
installed the ``[postgres]`` variants skip with that reason, unless
``FANFOLD_TEST_REQUIRE_POSTGRES=1`` (CI sets it), which makes them fail instead.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.cli.commands import main
from service.config import Settings, get_settings

from .postgres import (
    PostgresUnavailable,
    drop_postgres_database,
    fresh_postgres_database,
    temporary_postgres,
)

DEMO_CSV = Path(__file__).resolve().parents[2] / "examples" / "bike_parts_demand.csv"
REQUIRE_POSTGRES = "FANFOLD_TEST_REQUIRE_POSTGRES"
DATABASE_KINDS = ("sqlite", "postgres")


def pytest_generate_tests(metafunc: pytest.Metafunc) -> None:
    """Tests of a module marked ``both_databases`` that use ``database_url`` (directly or
    through ``settings`` / ``client``) run once per database kind."""
    if (metafunc.definition.get_closest_marker("both_databases") is not None
            and "database_kind" in metafunc.fixturenames):
        metafunc.parametrize("database_kind", DATABASE_KINDS, indirect=True)


@pytest.fixture(scope="session")
def postgres_server() -> Iterator[str]:
    """The admin URL of a throw-away PostgreSQL server on 127.0.0.1, one per session."""
    required = os.environ.get(REQUIRE_POSTGRES, "") not in ("", "0")
    try:
        with temporary_postgres() as url:
            yield url
    except PostgresUnavailable as exc:
        if required:
            pytest.fail(f"{REQUIRE_POSTGRES} is set but PostgreSQL cannot run: {exc}")
        pytest.skip(f"PostgreSQL cannot run here: {exc}")


@pytest.fixture
def database_kind(request: pytest.FixtureRequest) -> str:
    """"sqlite" unless the test is parametrized by :func:`pytest_generate_tests`."""
    return getattr(request, "param", "sqlite")


@pytest.fixture
def database_url(database_kind: str, tmp_path: Path,
                 request: pytest.FixtureRequest) -> Iterator[str]:
    """A fresh, empty database of ``database_kind`` for this test."""
    if database_kind == "sqlite":
        yield f"sqlite:///{tmp_path / 'fanfold.db'}"
        return
    server = request.getfixturevalue("postgres_server")
    url = fresh_postgres_database(server)
    yield url
    drop_postgres_database(server, url)


@pytest.fixture(autouse=True)
def _isolated_environment(monkeypatch, tmp_path):
    """No FANFOLD_* variable leaks in, and a default Settings() uses a temporary file."""
    keep = {"FANFOLD_UPDATE_OPENAPI"}
    for key in [k for k in os.environ if k.startswith("FANFOLD_") and k not in keep]:
        monkeypatch.delenv(key)
    monkeypatch.setenv("FANFOLD_DATABASE_URL", f"sqlite:///{tmp_path / 'fanfold.db'}")
    get_settings.cache_clear()
    yield
    get_settings.cache_clear()


@pytest.fixture
def settings(database_url: str) -> Settings:
    """Defaults, on this test's database (a file: worker threads need real connections)."""
    return Settings(database_url=database_url)


@pytest.fixture
def client(settings: Settings):
    with TestClient(create_app(settings)) as c:
        yield c


@pytest.fixture(scope="session")
def demo() -> pd.DataFrame:
    return pd.read_csv(DEMO_CSV, index_col=0, parse_dates=True)


@pytest.fixture
def demo_body(demo: pd.DataFrame) -> dict:
    """The first 4 years of three demo series as a JSON forecast request."""
    part = demo.iloc[:48][["tyres", "inner_tubes", "brake_pads"]]
    return {"series": {c: part[c].astype(float).tolist() for c in part},
            "start": "2016-01-01", "frequency": "MS", "horizon": 4, "draws": 300, "seed": 11,
            "lags": 2}


@pytest.fixture
def run(capsys: pytest.CaptureFixture[str]):
    """Run ``fanfold ARGS`` in-process; returns (exit status, stdout, stderr)."""

    def _run(*args: object) -> tuple[int, str, str]:
        code = main([str(a) for a in args])
        out, err = capsys.readouterr()
        return code, out, err

    return _run
