"""The per-group work: seeds from the batch seed and the key, failures per group."""

from __future__ import annotations

import subprocess
import sys

import numpy as np

from service.batch.table import Columns, split_groups
from service.batch.worker import forecast_chunk, forecast_group, group_seed

from .data import BAD_ERRORS, SPEC, long_table, with_bad_groups

COLUMNS = Columns(("warehouse", "family"))


def test_the_group_seed_is_stable_across_processes_and_depends_on_the_key():
    state = group_seed(7, ("leeds", "brakes")).generate_state(4).tolist()
    code = ("from service.batch.worker import group_seed; "
            "print(group_seed(7, ('leeds', 'brakes')).generate_state(4).tolist())")
    # a fresh interpreter has another PYTHONHASHSEED: Python's hash() would differ
    other = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                           check=True, env={"PYTHONHASHSEED": "123"}).stdout.strip()
    assert other == str(state)
    assert group_seed(7, ("leeds", "brakes")).generate_state(4).tolist() == state
    assert group_seed(8, ("leeds", "brakes")).generate_state(4).tolist() != state
    assert group_seed(7, ("leedsb", "rakes")).generate_state(4).tolist() != state
    assert group_seed(7, ("brakes", "leeds")).generate_state(4).tolist() != state


def test_a_group_forecasts_the_same_alone_and_in_any_chunk():
    groups = split_groups(long_table(6), COLUMNS).groups
    together = forecast_chunk(groups, SPEC)
    backwards = forecast_chunk(groups[::-1], SPEC)[::-1]
    for g, a, b in zip(groups, together, backwards, strict=True):
        alone = forecast_group(g, SPEC)
        assert a.ok and a.key == g.key and a.lags == 2
        assert a.quantiles.shape == (3, 3, len(g.names)) and a.mean.shape == (3, len(g.names))
        np.testing.assert_array_equal(a.quantiles, alone.quantiles)
        np.testing.assert_array_equal(b.quantiles, alone.quantiles)
        np.testing.assert_array_equal(a.dates, alone.dates)
    # distinct groups draw distinct numbers
    assert not np.array_equal(together[0].mean[:, 0], together[1].mean[:, 0])
    # another batch seed, other draws
    other = forecast_group(groups[0], SPEC._replace(seed=SPEC.seed + 1))
    assert not np.array_equal(other.quantiles, together[0].quantiles)


def test_groups_that_cannot_be_fit_fail_alone_with_their_error():
    split = split_groups(with_bad_groups(long_table(3)), COLUMNS)
    outcomes = {o.key: o for o in forecast_chunk(split.groups, SPEC)}
    for key, error_type in BAD_ERRORS.items():
        assert outcomes[key].error_type == error_type, outcomes[key]
        assert outcomes[key].error and outcomes[key].quantiles is None
    ok = [o for key, o in outcomes.items() if key not in BAD_ERRORS]
    assert len(ok) == 3 and all(o.ok for o in ok)
