"""The optimal two-model linear pool (priors/pooling.py): the weight against a bounded
scalar optimiser (scipy, the oracle) and the corner condition of Geweke & Amisano (2011,
"Optimal prediction pools", J. Econometrics 164): model A alone is optimal exactly when
sum_t exp(b_t - a_t) <= R. The log scores are those of two simple forecasters of US CPI
inflation (statsmodels' macrodata): the last value (random walk) and the expanding mean,
each with a normal density of its past one-step errors' s.d."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import optimize, stats

from priors.errors import SpecificationError
from priors.pooling import pool_log_score, pool_weight


@pytest.fixture(scope="module")
def scores() -> tuple[np.ndarray, np.ndarray]:
    infl = sm.datasets.macrodata.load_pandas().data["infl"].to_numpy()
    a, b = [], []
    for t in range(40, infl.size):
        past = infl[:t]
        rw_sd = np.std(np.diff(past), ddof=1)
        mean_sd = np.std(past, ddof=1)
        a.append(stats.norm.logpdf(infl[t], past[-1], rw_sd))
        b.append(stats.norm.logpdf(infl[t], past.mean(), mean_sd))
    return np.array(a), np.array(b)


def _oracle(a: np.ndarray, b: np.ndarray, kappa: float = 0.0) -> float:
    res = optimize.minimize_scalar(
        lambda w: -(pool_log_score(a, b, w) + kappa * np.log(w)), bounds=(1e-9, 1 - 1e-9),
        method="bounded", options={"xatol": 1e-10})
    return float(res.x)


@pytest.mark.parametrize("window", [slice(0, 40), slice(40, 100), slice(100, None),
                                    slice(None)])
def test_weight_is_the_maximiser(scores, window) -> None:
    a, b = scores[0][window], scores[1][window]
    w = pool_weight(a, b)
    if 0 < w < 1:
        assert w == pytest.approx(_oracle(a, b), abs=1e-6)
    grid = np.linspace(0, 1, 1001)
    assert pool_log_score(a, b, w) >= max(pool_log_score(a, b, g) for g in grid) - 1e-9


def test_corner_condition(scores) -> None:
    a, b = scores
    for lo in range(0, a.size - 12, 6):
        sa, sb = a[lo:lo + 12], b[lo:lo + 12]
        w = pool_weight(sa, sb)
        assert (w == 1.0) == (np.sum(np.exp(sb - sa)) <= sa.size)
        assert (w == 0.0) == (np.sum(np.exp(sa - sb)) <= sa.size)


def test_swapping_the_models_swaps_the_weight(scores) -> None:
    a, b = scores
    assert pool_weight(b, a) == pytest.approx(1 - pool_weight(a, b), abs=1e-9)


def test_prior_weight_leans_towards_model_a(scores) -> None:
    a, b = scores[0][40:100], scores[1][40:100]
    plain = pool_weight(a, b)
    assert 0 < plain < 1
    weights = [pool_weight(a, b, prior_weight=k) for k in (0.0, 5.0, 20.0, 80.0)]
    assert weights[0] == plain and all(np.diff(weights) > 0)
    assert weights[2] == pytest.approx(_oracle(a, b, 20.0), abs=1e-6)


def test_a_density_of_zero_does_not_break_the_search() -> None:
    a = np.array([0.0, -800.0, 0.0])  # exp(-800) underflows to 0
    b = np.array([-1.0, 0.0, -1.0])
    w = pool_weight(a, b)
    assert 0 < w < 1 and np.isfinite(pool_log_score(a, b, w))


@pytest.mark.parametrize(("a", "b", "kappa", "message"), [
    (np.zeros(3), np.zeros(2), 0.0, "1-D"), (np.zeros(0), np.zeros(0), 0.0, "1-D"),
    (np.array([np.nan]), np.zeros(1), 0.0, "finite"), (np.zeros(2), np.zeros(2), -1.0, ">= 0")])
def test_bad_input(a, b, kappa, message) -> None:
    with pytest.raises(SpecificationError, match=message):
        pool_weight(a, b, prior_weight=kappa)
