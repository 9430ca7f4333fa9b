"""Cooperative cancellation: checkpoints stop long loops once their token is cancelled."""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest

from priors import CancelToken, FanfoldVAR, WorkCancelled, cancel_scope, checkpoint
from priors.errors import PriorsError

from .helpers import FIXED, two_lines


def test_checkpoint_outside_a_scope_does_nothing():
    checkpoint()


def test_checkpoint_raises_once_the_token_is_cancelled():
    token = CancelToken()
    with cancel_scope(token):
        checkpoint()
        token.cancel("the caller went away")
        with pytest.raises(WorkCancelled, match="the caller went away"):
            checkpoint()
    checkpoint()  # the scope ended with the block
    assert isinstance(WorkCancelled("x"), PriorsError)


def test_a_deadline_cancels_by_itself():
    token = CancelToken(deadline_s=0.01)
    with cancel_scope(token):
        time.sleep(0.02)
        with pytest.raises(WorkCancelled, match="time limit"):
            checkpoint()
    assert token.cancelled


def test_scopes_nest_and_threads_do_not_see_each_others_tokens():
    outer, inner = CancelToken(), CancelToken()
    inner.cancel()
    seen = []

    def other_thread():
        checkpoint()  # a fresh thread starts outside any scope
        seen.append("ok")

    with cancel_scope(outer):
        with cancel_scope(inner), pytest.raises(WorkCancelled):
            checkpoint()
        checkpoint()  # back to the outer, live token
        worker = threading.Thread(target=other_thread)
        worker.start()
        worker.join()
    assert seen == ["ok"]


def _cancel_after(token: CancelToken, seconds: float) -> threading.Timer:
    timer = threading.Timer(seconds, token.cancel)
    timer.start()
    return timer


def test_a_gibbs_fit_stops_within_a_sweep_of_the_cancel():
    y = two_lines()
    long = FanfoldVAR(lags=2, prior="independent", chains=1, burn=200_000, keep=10, **FIXED)
    token = CancelToken()
    timer = _cancel_after(token, 0.3)
    start = time.perf_counter()
    with cancel_scope(token), pytest.raises(WorkCancelled):
        long.fit(y, rng=np.random.default_rng(0))  # about a minute uncancelled
    timer.join()
    assert time.perf_counter() - start < 3.0


def test_a_scenario_with_ranges_stops_within_a_sweep_of_the_cancel():
    model = FanfoldVAR(lags=2, **FIXED).fit(two_lines())
    conds = [model.condition(name, step, lower=-1e6, upper=1e6, horizon=12)
             for name in ("tyres", "inner_tubes") for step in range(1, 13)]
    token = CancelToken()
    timer = _cancel_after(token, 0.3)
    start = time.perf_counter()
    with cancel_scope(token), pytest.raises(WorkCancelled):
        # about a minute uncancelled
        model.scenario(12, conds, rng=np.random.default_rng(0), draws=2000, sweeps=1000)
    timer.join()
    assert time.perf_counter() - start < 3.0


def test_an_uncancelled_token_changes_nothing():
    model = FanfoldVAR(lags=2, **FIXED).fit(two_lines())
    plain = model.forecast(6, rng=np.random.default_rng(4), draws=200).paths
    with cancel_scope(CancelToken(deadline_s=60)):
        scoped = model.forecast(6, rng=np.random.default_rng(4), draws=200).paths
    np.testing.assert_array_equal(plain, scoped)
