"""Fixtures for the HTTP tests: an app on default settings and the demo data."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.cli.commands import main
from service.config import Settings, get_settings

DEMO_CSV = Path(__file__).resolve().parents[2] / "examples" / "bike_parts_demand.csv"


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
def settings() -> Settings:
    """Defaults, on the temporary database file (worker threads need real connections)."""
    return Settings()


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
