"""A batch on a separate ``dask scheduler`` and ``dask worker`` (the commands of
deploy/compose.yaml and k8s/) on 127.0.0.1, found through FANFOLD_DASK_ADDRESS."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
from distributed import Client

from .data import long_table

DASK = Path(sys.executable).with_name("dask")
FLAGS = ["--lags", "2", "--tightness", "0.2", "--sum-coef", "off", "--initial", "off",
         "--seasonal", "off", "--transform", "none", "--season-scale", "off"]


def _stop(process: subprocess.Popen) -> None:
    if process.poll() is None:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(20)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(10)


@pytest.fixture(scope="module")
def scheduler_address(tmp_path_factory):
    folder = tmp_path_factory.mktemp("dask")
    info = folder / "scheduler.json"
    logs = [open(folder / name, "w") for name in ("scheduler.log", "worker.log")]
    scheduler = subprocess.Popen(
        [str(DASK), "scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
         "--scheduler-file", str(info)], stdout=logs[0], stderr=subprocess.STDOUT)
    worker = None
    try:
        deadline = time.monotonic() + 60
        while not info.exists() or not info.read_text().strip():
            assert scheduler.poll() is None and time.monotonic() < deadline, \
                (folder / "scheduler.log").read_text()
            time.sleep(0.2)
        address = json.loads(info.read_text())["address"]
        worker = subprocess.Popen(
            [str(DASK), "worker", address, "--nworkers", "1", "--nthreads", "1",
             "--no-dashboard", "--local-directory", str(folder)],
            stdout=logs[1], stderr=subprocess.STDOUT, cwd=folder)
        with Client(address, timeout=30, set_as_default=False) as client:
            client.wait_for_workers(1, timeout=60)  # bounded: the batch itself has no limit
        yield address
    finally:
        for process in (worker, scheduler):
            if process is not None:
                _stop(process)
        for log in logs:
            log.close()


def test_the_cli_runs_on_the_scheduler_named_in_the_settings(scheduler_address, run,
                                                             tmp_path, monkeypatch):
    monkeypatch.setenv("FANFOLD_DASK_ADDRESS", scheduler_address)
    data, out = tmp_path / "demand.csv", tmp_path / "out.parquet"
    long_table(6, seed=8).to_csv(data, index=False)
    code, stdout, stderr = run("batch", data, "--group-by", "warehouse,family",
                               "--horizon", 2, "--draws", 30, "--seed", 3, "--out", out, *FLAGS)
    assert code == 0, stderr
    assert f"6 groups on {scheduler_address}" in stderr
    assert "6 groups: 6 forecast, 0 failed (seed 3)" in stdout
    assert set(pd.read_parquet(tmp_path / "out.status.parquet")["status"]) == {"ok"}
    assert len(pd.read_parquet(out)) > 0
    assert os.environ["FANFOLD_DASK_ADDRESS"].startswith("tcp://127.0.0.1:")
