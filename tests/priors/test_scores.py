"""Scores against closed forms, check values and independent computations."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from priors.errors import SpecificationError
from priors.scores import (
    coverage_test,
    crps_ensemble,
    crps_normal,
    diebold_mariano,
    energy_score,
    pinball_loss,
    pit_values,
)


def test_crps_normal_check_values_and_numerical_integral():
    # Gneiting & Raftery (2007) closed form; values from the methods brief (checked
    # numerically there) and the defining integral int (F(x) - 1{x >= y})^2 dx by quad.
    got = crps_normal(0.0, 1.0, np.array([0.0, 1.0, 2.0]))
    np.testing.assert_allclose(got, [0.2336950, 0.6024414, 1.4527918], atol=1e-7)
    mu, sigma, y = 1.5, 2.0, -0.3
    left = integrate.quad(lambda x: stats.norm.cdf(x, mu, sigma) ** 2, -np.inf, y)[0]
    right = integrate.quad(lambda x: (1 - stats.norm.cdf(x, mu, sigma)) ** 2, y, np.inf)[0]
    assert crps_normal(mu, sigma, y) == pytest.approx(left + right, rel=1e-8)


def test_crps_ensemble_small_cases():
    # {1, 2, 3} with y = 2: 0.2222222 (standard) and 0 (fair); y = 0: 1.5555556
    x = np.array([1.0, 2.0, 3.0])
    assert crps_ensemble(x, 2.0, fair=False) == pytest.approx(0.2222222, abs=1e-7)
    assert crps_ensemble(x, 2.0, fair=True) == pytest.approx(0.0, abs=1e-12)
    assert crps_ensemble(x, 0.0, fair=False) == pytest.approx(1.5555556, abs=1e-7)
    # the sorted-order formula equals the definition E|X-y| - 1/2 E|X-X'| pair by pair
    rng = np.random.default_rng(0)
    draws = rng.standard_normal(50)
    direct = np.abs(draws - 0.3).mean() - 0.5 * np.abs(draws[:, None] - draws[None]).mean()
    assert crps_ensemble(draws, 0.3, fair=False) == pytest.approx(direct, rel=1e-12)


def test_fair_crps_of_many_draws_approaches_the_normal_closed_form():
    rng = np.random.default_rng(1)
    draws = rng.normal(2.0, 3.0, size=(200_000, 3))
    y = np.array([2.0, 5.0, -4.0])
    np.testing.assert_allclose(crps_ensemble(draws, y), crps_normal(2.0, 3.0, y), rtol=0.01)


def test_energy_score_check_value_and_univariate_case():
    # {(0,0), (1,0), (0,1)} at y = (0,0): 0.2873096 (methods brief, computed there)
    x = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    assert energy_score(x, np.zeros(2)) == pytest.approx(0.2873096, abs=1e-7)
    # in one dimension the energy score is the (standard) CRPS
    rng = np.random.default_rng(2)
    draws = rng.standard_normal((300, 1))
    assert energy_score(draws, np.array([0.4]), chunk=64) == pytest.approx(
        crps_ensemble(draws[:, 0], 0.4, fair=False), rel=1e-12)


def test_pinball_check_values():
    assert pinball_loss(10.0, 12.0, 0.9) == pytest.approx(1.8)
    assert pinball_loss(10.0, 8.0, 0.9) == pytest.approx(0.2)
    with pytest.raises(SpecificationError):
        pinball_loss(1.0, 1.0, 1.0)


def test_pit_of_calibrated_forecasts_is_uniform():
    # Diebold, Gunther & Tay (1998): outcomes drawn from the forecast distribution give
    # uniform PITs; KS test at 1e-3 (fixed seed).
    rng = np.random.default_rng(3)
    draws = rng.standard_normal((400, 2000))
    y = rng.standard_normal(2000)
    u = pit_values(rng, draws, y)
    assert stats.kstest(u, "uniform").pvalue > 1e-3
    # and a forecast that is too narrow is caught
    u_bad = pit_values(rng, 0.5 * draws, y)
    assert stats.kstest(u_bad, "uniform").pvalue < 1e-6


def test_coverage_test_matches_christoffersen_formula():
    hits = np.array([1] * 85 + [0] * 15)
    rate, lr, p = coverage_test(hits, 0.8)
    expected = 2 * (85 * np.log(0.85 / 0.8) + 15 * np.log(0.15 / 0.2))
    assert rate == 0.85 and lr == pytest.approx(expected) and p == pytest.approx(
        stats.chi2.sf(expected, 1))
    assert coverage_test(np.ones(10), 0.9)[1] == pytest.approx(-2 * 10 * np.log(0.9))


def test_diebold_mariano_with_small_sample_correction():
    rng = np.random.default_rng(4)
    a = rng.standard_normal(60) ** 2
    b = a + 0.5 + 0.1 * rng.standard_normal(60)  # b is clearly worse
    dm, p = diebold_mariano(a, b, horizon=1)
    d = a - b
    plain = d.mean() / np.sqrt(d.var() / 60)
    assert dm == pytest.approx(plain * np.sqrt((60 + 1 - 2) / 60), rel=1e-12)  # HLN 1997
    assert dm < 0 and p < 1e-6
    # under the null (exchangeable losses) p-values are not systematically small
    ps = [diebold_mariano(rng.standard_normal(80) ** 2, rng.standard_normal(80) ** 2, 3)[1]
          for _ in range(400)]
    assert 0.02 < np.mean(np.array(ps) < 0.05) < 0.09


def _overlapping_pits(rng, P, h, scale=1.0):
    """PITs of calibrated h-step forecasts from overlapping origins: the outcome is the
    sum of the next h shocks, the forecast N(0, h) (scale < 1: bands too narrow)."""
    e = rng.standard_normal(P + h)
    y = np.convolve(e, np.ones(h), mode="valid")[:P]
    return stats.norm.cdf(y / (np.sqrt(h) * scale))


def test_pit_moment_test_holds_its_size_with_overlapping_forecasts():
    # Knueppel (2015): h-step PITs are MA(h-1); with the HAC covariance the test keeps
    # roughly its nominal size, while ignoring the overlap over-rejects. 400 replications
    # of P = 480, h = 3, nominal 5%, two moments. Measured sizes (600 replications):
    # 11.5% at P = 60, 9.2% at 120, 7.8% at 240, 6% at 480; ignoring the overlap: 30-37%.
    # Power against bands 30% too narrow: 61% at P = 120, 99% at 240. Small backtests
    # therefore over-reject somewhat (documented).
    from priors.scores import pit_moment_test

    rng = np.random.default_rng(17)
    hac, naive = [], []
    for _ in range(400):
        u = _overlapping_pits(rng, 480, 3)
        hac.append(pit_moment_test(u, 3, 2)[1] < 0.05)
        naive.append(pit_moment_test(u, 1, 2)[1] < 0.05)
    assert np.mean(hac) < 0.09
    assert np.mean(naive) > np.mean(hac) + 0.15


def test_pit_moment_test_detects_bands_that_are_too_narrow():
    from priors.scores import pit_moment_test

    rng = np.random.default_rng(18)
    rejected = [pit_moment_test(_overlapping_pits(rng, 240, 3, scale=0.7), 3, 2)[1] < 0.05
                for _ in range(100)]
    assert np.mean(rejected) > 0.8


def test_pit_moment_test_checks_its_input():
    from priors.scores import pit_moment_test

    with pytest.raises(SpecificationError, match="at least 10"):
        pit_moment_test(np.full(5, 0.5))
    with pytest.raises(SpecificationError, match="strictly between"):
        pit_moment_test(np.linspace(0, 1, 20))
    with pytest.raises(SpecificationError, match="moments"):
        pit_moment_test(np.linspace(0.01, 0.99, 20), moments=5)
