"""Batches on a real LocalCluster (worker processes): the same forecasts as each group
alone, failures per group, killed workers, and the scheduler-address path of the CLI.

One cluster for the module (2 worker processes, 1 thread each), started with bounded
waits and closed at the end. Its scheduler gives up on a task after 2 worker deaths
(``allowed-failures`` 1) so that a task that always kills its worker ends quickly.
"""

from __future__ import annotations

import functools

import numpy as np
import pandas as pd
import pytest

from service.batch.runner import run_batch
from service.batch.table import Columns, split_groups
from service.batch.worker import forecast_chunk
from service.cli.commands import _model_params, build_parser

from ..helpers import dask_cluster
from .data import BAD_ERRORS, SPEC, dying_chunk, long_table, raising_chunk, with_bad_groups

COLUMNS = Columns(("warehouse", "family"))
LIMIT_S = 120  # no batch here may take longer


@pytest.fixture(scope="module")
def client():
    # worker-saturation 1.0: a worker holds only the task it runs, so a dying task takes
    # no queued innocent task down with it (those are recomputed, not blamed)
    with dask_cluster(2, config={"distributed.scheduler.allowed-failures": 1,
                                 "distributed.scheduler.worker-saturation": 1.0}) as client:
        yield client


def _alone(groups):
    return {g.key: forecast_chunk([g], SPEC)[0] for g in groups}


def _assert_same(outcome, alone):
    assert outcome.ok, outcome
    np.testing.assert_array_equal(outcome.quantiles, alone.quantiles)
    np.testing.assert_array_equal(outcome.mean, alone.mean)
    np.testing.assert_array_equal(outcome.dates, alone.dates)


def test_a_200_group_batch_equals_each_group_forecast_alone(client):
    split = split_groups(with_bad_groups(long_table(200)), COLUMNS)
    seen = []
    outcomes = run_batch(client, split.groups, SPEC, progress=lambda d, t: seen.append((d, t)),
                         timeout_s=LIMIT_S)
    assert [o.key for o in outcomes] == [g.key for g in split.groups]  # each once, in order
    assert len(outcomes) == 203
    alone = _alone(split.groups)
    for o in outcomes:
        if o.key in BAD_ERRORS:
            assert o.error_type == BAD_ERRORS[o.key] and o.error
        else:
            _assert_same(o, alone[o.key])
    done = [d for d, _ in seen]
    assert done == sorted(done) and seen[-1] == (203, 203) and len(seen) > 4


def test_the_cli_runs_on_a_scheduler_address(client, run, tmp_path):
    data = tmp_path / "demand.parquet"
    long_table(12, seed=5).to_parquet(data)
    flags = ["--lags", "2", "--tightness", "0.2", "--sum-coef", "off", "--initial", "off",
             "--seasonal", "off", "--transform", "none", "--season-scale", "off"]
    address = client.scheduler.address
    for out in (tmp_path / "out.csv", tmp_path / "out.parquet"):
        code, stdout, stderr = run("batch", data, "--group-by", "warehouse,family",
                                   "--horizon", 3, "--draws", 40, "--quantiles", "0.1,0.5,0.9",
                                   "--seed", 2024, "--out", out, "--scheduler", address, *flags)
        assert code == 0, stderr
        assert f"12 groups on {address}" in stderr and "batch 12/12 groups (100%" in stderr
        assert "12 groups: 12 forecast, 0 failed (seed 2024)" in stdout
        read = pd.read_parquet if out.suffix == ".parquet" else pd.read_csv
        table = read(out)
        status = read(out.with_name(f"out.status{out.suffix}"))
        assert list(table.columns) == ["warehouse", "family", "series", "date", "step", "mean",
                                       "q0.1", "q0.5", "q0.9"]
        assert len(status) == 12 and set(status["status"]) == {"ok"}
    params = _model_params(build_parser().parse_args(["batch", "x.csv", "--group-by", "w",
                                                      "--horizon", "3", "--out", "o.csv",
                                                      *flags]))
    spec = SPEC._replace(params=params)
    (first, *_) = split_groups(long_table(12, seed=5), COLUMNS).groups
    expected = forecast_chunk([first], spec)[0]
    rows = table[(table["warehouse"] == first.key[0]) & (table["family"] == first.key[1])]
    assert len(rows) == 3 * len(first.names)
    np.testing.assert_array_equal(rows["q0.9"].to_numpy(), expected.quantiles[2].T.ravel())
    np.testing.assert_array_equal(rows["mean"].to_numpy(), expected.mean.T.ravel())


def test_a_task_that_keeps_raising_fails_its_chunks_groups_after_its_retries(client):
    groups = split_groups(long_table(12, seed=3), COLUMNS).groups
    task = functools.partial(raising_chunk, victim=groups[4].key)
    outcomes = run_batch(client, groups, SPEC, chunk_size=3, retries=1, chunk_function=task,
                         timeout_s=LIMIT_S)
    assert [o.key for o in outcomes] == [g.key for g in groups]
    lost = [o for o in outcomes if not o.ok]
    assert [o.key for o in lost] == [g.key for g in groups[3:6]]
    for o in lost:
        assert o.error_type == "OSError" and "after its retries" in o.error
        assert "scratch disk is full" in o.error


def test_a_progress_callback_that_raises_stops_the_batch(client):
    groups = split_groups(long_table(30, seed=4), COLUMNS).groups
    calls = []

    class Stop(Exception):  # as a job's progress raises once the job is cancelled
        pass

    def stop(done, total):
        calls.append(done)
        raise Stop

    with pytest.raises(Stop):
        run_batch(client, groups, SPEC, chunk_size=1, progress=stop, timeout_s=LIMIT_S)
    assert calls == [1]


def test_a_worker_killed_mid_batch_is_survived(client, tmp_path):
    groups = split_groups(long_table(40, seed=1), COLUMNS).groups
    victim, marker = groups[17].key, tmp_path / "died-once"
    task = functools.partial(dying_chunk, victim=victim, marker=str(marker))
    outcomes = run_batch(client, groups, SPEC, chunk_size=5, chunk_function=task,
                         timeout_s=LIMIT_S)
    assert marker.exists()  # the first attempt at the victim's chunk killed its worker
    assert [o.key for o in outcomes] == [g.key for g in groups]
    alone = _alone(groups)
    for o in outcomes:
        _assert_same(o, alone[o.key])
    client.wait_for_workers(2, timeout=60)


def test_a_task_that_always_kills_its_worker_fails_its_groups_with_the_reason(client):
    groups = split_groups(long_table(30, seed=2), COLUMNS).groups
    victim = groups[12].key
    task = functools.partial(dying_chunk, victim=victim, marker=None)
    outcomes = run_batch(client, groups, SPEC, chunk_size=5, chunk_function=task,
                         timeout_s=LIMIT_S)
    assert [o.key for o in outcomes] == [g.key for g in groups]  # nothing silently missing
    lost = [o for o in outcomes if not o.ok]
    # the victim's chunk was sent again one group per task: only the victim is lost (a
    # task running beside it on a dying worker could be blamed too: dask counts the
    # death against every task the worker was running; with worker-saturation 1.0 and
    # one thread, there is none)
    assert [o.key for o in lost] == [victim]
    assert lost[0].error_type == "WorkerLost" and "died on every attempt" in lost[0].error
    alone = _alone(groups)
    for o in outcomes:
        if o.ok:
            _assert_same(o, alone[o.key])
    client.wait_for_workers(2, timeout=60)
