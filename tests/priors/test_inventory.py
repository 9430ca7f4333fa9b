"""Inventory quantities against closed forms, hand counts and fixed-parameter simulation.

Sources: Silver, Pyke & Thomas (2017) (SPT), ch. 6, for the normal reorder point, the
loss function G_u and the fill-rate condition; the methods brief sec. 12-13 for the
AR(1) worked value and check values 15-18. Monte Carlo tolerances are 5 standard
errors, each derived in its test.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from priors.errors import SpecificationError
from priors.inventory import (
    ReplenishmentAdvice,
    exceedance_probabilities,
    expected_shortage,
    fill_rate_reorder_point,
    lead_time_covariance,
    reorder_point,
    replenishment_advice,
    window_totals,
)
from priors.predictive import _recursion

Z = 5.0  # Monte Carlo tolerance in standard errors


def G_u(k):
    """SPT's unit normal loss function, G_u(k) = phi(k) - k (1 - Phi(k))."""
    return stats.norm.pdf(k) - k * stats.norm.sf(k)


def _iid_normal_paths(S=200_000, L=4, mu=100.0, sigma=10.0, seed=0):
    return np.random.default_rng(seed).normal(mu, sigma, size=(S, L, 1))


def _fixed_parameter_paths(B, Sigma, history, steps, S, seed):
    """Paths of a VAR with one (B, Sigma) repeated S times (constant only as det.)."""
    Bs = np.repeat(B[None], S, axis=0)
    M = np.repeat(np.linalg.cholesky(Sigma)[None], S, axis=0)
    return _recursion(np.random.default_rng(seed), Bs, M, history, np.ones((steps, 1)))


# --- normal cross-checks (SPT 2017) -----------------------------------------------------

def test_normal_loss_oracle_check_values():
    # methods brief check values 15 and 17
    assert stats.norm.ppf(0.95) == pytest.approx(1.6448536, abs=1e-7)
    assert G_u(0.0) == pytest.approx(0.398942, abs=1e-6)
    assert G_u(1.645) == pytest.approx(0.020886, abs=1e-6)


def test_reorder_point_of_iid_normal_demand_is_mu_L_plus_z_sigma_sqrt_L():
    # SPT: s = mu L + z sigma sqrt(L); mu 100, sigma 10, L 4 -> 432.8971 (check value 16).
    # s.e. of the p-quantile: sqrt(p (1 - p) / S) / f(s), f the N(400, 20^2) density.
    S, p = 200_000, 0.95
    D = window_totals(_iid_normal_paths(S), weights=[1.0])
    z = stats.norm.ppf(p)
    expected = 400.0 + z * 20.0
    assert expected == pytest.approx(432.8971, abs=1e-4)
    se = np.sqrt(p * (1 - p) / S) / (stats.norm.pdf(z) / 20.0)
    assert abs(reorder_point(D, p) - expected) < Z * se


def test_fill_rate_reorder_point_matches_the_normal_loss_solution():
    # SPT: G_u(k) = Q (1 - P2) / sigma_L, s = mu_L + k sigma_L; k by brentq (oracle).
    # s solves G_S(s) = t, so s.e.(s) = sd((D - s)^+) / (sqrt(S) P(D > s)) (delta method).
    S, Q, p2, mu_L, sd_L = 200_000, 200.0, 0.98, 400.0, 20.0
    D = window_totals(_iid_normal_paths(S, seed=1), weights=[1.0])
    k = optimize.brentq(lambda k: G_u(k) - Q * (1 - p2) / sd_L, -5, 5, xtol=1e-12)
    expected = mu_L + k * sd_L
    loss2 = (1 + k**2) * stats.norm.sf(k) - k * stats.norm.pdf(k)  # E[((X - k)^+)^2]
    sd_short = sd_L * np.sqrt(loss2 - G_u(k) ** 2)
    se = sd_short / (np.sqrt(S) * stats.norm.sf(k))
    assert abs(fill_rate_reorder_point(D, p2, Q) - expected) < Z * se


@pytest.mark.parametrize("stock", [370.0, 400.0, 425.0, 445.0])
def test_expected_shortage_matches_sigma_G_u_for_normal_demand(stock):
    # SPT: E[(D - s)^+] = sigma_L G_u((s - mu_L) / sigma_L); s.e. from the sample s.d.
    S = 200_000
    D = window_totals(_iid_normal_paths(S, seed=2), weights=[1.0])
    expected = 20.0 * G_u((stock - 400.0) / 20.0)
    se = np.maximum(D - stock, 0.0).std() / np.sqrt(S)
    assert abs(expected_shortage(D, stock) - expected) < Z * se


# --- exact results on small samples -----------------------------------------------------

def test_expected_shortage_hand_computed_and_vectorised():
    D = np.array([4.0, 1.0, 7.0, 2.0])
    # s = 3: (1 + 4) / 4; s = 2.5: (1.5 + 4.5) / 4; below min: mean - s; above max: 0
    assert expected_shortage(D, 3.0) == 1.25
    assert isinstance(expected_shortage(D, 3.0), float)
    got = expected_shortage(D, np.array([[2.5, 0.0], [7.0, -1.0]]))
    np.testing.assert_allclose(got, [[1.5, 3.5], [0.0, 4.5]], rtol=1e-15)
    rng = np.random.default_rng(3)
    x = rng.gamma(2.0, 50.0, 5_000).round()  # many ties
    s = np.linspace(-10, x.max() + 5, 37)
    direct = np.maximum(x[:, None] - s, 0.0).mean(axis=0)
    np.testing.assert_allclose(expected_shortage(x, s), direct, rtol=1e-12, atol=1e-12)


def test_reorder_point_uses_the_inverted_cdf_quantile():
    # smallest draw d with #{D <= d} / S >= P1: the achieved cycle service level on the
    # draws is never below the target
    D = np.array([3.0, 1.0, 4.0, 2.0])
    assert reorder_point(D, 0.5) == 2.0
    assert reorder_point(D, 0.51) == 3.0
    x = np.random.default_rng(4).poisson(20, 997).astype(float)
    for p in (0.5, 0.8, 0.9, 0.95, 0.99):
        s = reorder_point(x, p)
        assert np.mean(x <= s) >= p
        assert np.mean(x < s) < p  # and no smaller draw would do


@pytest.mark.parametrize("draws", ["gamma", "poisson"])
def test_fill_rate_reorder_point_inverts_the_shortage_exactly(draws):
    rng = np.random.default_rng(5)
    x = rng.gamma(2.0, 30.0, 4_000) if draws == "gamma" else rng.poisson(8, 4_000) * 1.0
    Q = 100.0
    rates = np.linspace(0.5, 0.999, 40)
    s = np.array([fill_rate_reorder_point(x, p2, Q) for p2 in rates])
    shortage = np.maximum(x[:, None] - s, 0.0).mean(axis=0)
    np.testing.assert_allclose(shortage, (1 - rates) * Q, rtol=1e-9)
    assert np.all(np.diff(s) > 0)  # a higher fill rate needs a higher reorder point
    # smallest such s: a little less stock misses the target
    assert np.all(expected_shortage(x, s - 1e-6) > (1 - rates) * Q)


def test_loose_fill_rate_target_lies_below_the_smallest_draw():
    # (1 - P2) Q >= mean - min: G(s) = mean - s there, so s = mean - (1 - P2) Q, unclipped
    x = np.array([10.0, 12.0, 14.0])
    s = fill_rate_reorder_point(x, 0.5, 30.0)  # target 15 > mean - min = 2
    assert s == pytest.approx(12.0 - 15.0, abs=1e-12)
    assert expected_shortage(x, s) == pytest.approx(15.0, abs=1e-12)
    assert fill_rate_reorder_point(x, 0.5, 4.0) == pytest.approx(10.0, abs=1e-12)  # = 2


# --- lead-time covariance of a VAR (methods brief sec. 12) ------------------------------

AR1_B = np.array([[50.0], [0.5]])  # c = 50, phi = 0.5: mean 100
AR1_SIGMA = np.array([[100.0]])


def test_ar1_lead_time_sd_worked_value():
    # phi 0.5, sigma 10, L 4: C_s = 1.875, 1.75, 1.5, 1, so Var = 100 (1.875^2 + 1.75^2
    # + 1.5^2 + 1) = 982.8125; sigma_L 31.35 (31.3498, check value 18) vs naive 20,
    # SS95 51.57 (51.5659) vs 32.90.
    V = lead_time_covariance(AR1_B, AR1_SIGMA, n_det=1, lags=1, lead_time=4)
    assert V.shape == (1, 1)
    assert V[0, 0] == pytest.approx(982.8125, rel=1e-14)
    sd_L = np.sqrt(V[0, 0])
    z = stats.norm.ppf(0.95)
    assert round(sd_L, 2) == 31.35 and sd_L == pytest.approx(31.3498, abs=1e-4)
    assert round(z * sd_L, 2) == 51.57 and z * sd_L == pytest.approx(51.5659, abs=1e-4)
    assert round(z * 10.0 * np.sqrt(4), 2) == 32.90


def test_ar1_simulated_lead_time_sum_matches_the_plug_in_variance():
    # Parameters held fixed (the brief: the full predictive variance is larger). Sample
    # variance s.e. = V sqrt(2 / (S - 1)) for normal D; 95% quantile s.e. as above.
    S = 200_000
    paths = _fixed_parameter_paths(AR1_B, AR1_SIGMA, np.array([[100.0]]), 4, S, seed=6)
    D = window_totals(paths, weights=[1.0])
    V = 982.8125
    assert abs(D.var(ddof=1) - V) < Z * V * np.sqrt(2 / (S - 1))
    assert abs(D.mean() - 400.0) < Z * np.sqrt(V / S)
    z = stats.norm.ppf(0.95)
    se_q = np.sqrt(0.95 * 0.05 / S) / (stats.norm.pdf(z) / np.sqrt(V))
    assert abs(reorder_point(D, 0.95) - 400.0 - 51.5659) < Z * se_q


def _var2_B(known_var):
    """(7, 3) B of the conftest VAR(2): constant row, then A_1', A_2'."""
    return np.vstack([known_var.c, known_var.A[0].T, known_var.A[1].T])


class _UnitShocks:
    """Stand-in generator: hands _recursion prepared 'normals' (one unit shock each)."""

    def __init__(self, z):
        self.z = z

    def standard_normal(self, shape):
        assert shape == self.z.shape
        return self.z


def test_var2_lead_time_covariance_equals_the_sum_of_shock_responses(known_var):
    # Exact: D_L is linear in the L n unit shocks, so Var(D_L) = sum_r d_r d_r' with d_r
    # the lead-time sum of the response to shock r, run through the project's recursion
    # (constant and history zero).
    L, n = 6, known_var.n
    B = _var2_B(known_var)
    B0 = B.copy()
    B0[0] = 0.0
    z = np.zeros((L * n, n, L))
    for t in range(L):
        z[t * n + np.arange(n), np.arange(n), t] = 1.0
    M = np.linalg.cholesky(known_var.Sigma)
    paths = _recursion(_UnitShocks(z), np.repeat(B0[None], L * n, axis=0),
                       np.repeat(M[None], L * n, axis=0), np.zeros((2, n)), np.ones((L, 1)))
    d = paths.sum(axis=1)
    V = lead_time_covariance(B, known_var.Sigma, n_det=1, lags=2, lead_time=L)
    np.testing.assert_allclose(V, d.T @ d, rtol=1e-12)
    # L = 1: the one-step covariance is Sigma
    np.testing.assert_allclose(lead_time_covariance(B, known_var.Sigma, 1, 2, 1),
                               known_var.Sigma, rtol=1e-15)


def test_var2_simulated_lead_time_covariance_matches_analytic(known_var):
    # "The variance of the lead-time sum equals the analytic sum of forecast-error
    # covariances", fixed parameters, cross effects in A_1, A_2 and Sigma. For normal D
    # the sample covariance has s.e. sqrt((V_ii V_jj + V_ij^2) / S).
    S, L = 200_000, 6
    B = _var2_B(known_var)
    history = np.array([[1.0, 2.0, -1.0], [3.0, 0.5, 0.0]])
    paths = _fixed_parameter_paths(B, known_var.Sigma, history, L, S, seed=7)
    V = lead_time_covariance(B, known_var.Sigma, n_det=1, lags=2, lead_time=L)
    D = window_totals(paths)
    se = np.sqrt((np.outer(np.diag(V), np.diag(V)) + V**2) / S)
    assert np.all(np.abs(np.cov(D, rowvar=False) - V) < Z * se)
    # autocorrelation matters: far above L Sigma, the i.i.d. answer
    assert np.all(np.diag(V) > 1.5 * L * np.diag(known_var.Sigma))


# --- window totals and exceedance -------------------------------------------------------

def test_window_totals_are_per_path_sums():
    rng = np.random.default_rng(8)
    paths = rng.normal(size=(500, 6, 3))
    w = np.array([1.0, 0.0, 2.5])
    manual = sum(w[i] * paths[:, h, i] for h in range(1, 5) for i in range(3))
    np.testing.assert_allclose(window_totals(paths, 2, 5, weights=w), manual, rtol=1e-12)
    np.testing.assert_allclose(window_totals(paths), paths.sum(axis=1), rtol=1e-15)
    assert window_totals(paths, 3).shape == (500, 3)


def test_window_totals_keep_cross_series_correlation():
    # two perfectly negatively correlated series: their total is constant, so its
    # variance is ~0, not the sum of the two variances
    rng = np.random.default_rng(9)
    a = rng.normal(50.0, 10.0, size=(10_000, 4))
    paths = np.stack([a, 100.0 - a], axis=2)
    D = window_totals(paths, weights=[1.0, 1.0])
    np.testing.assert_allclose(D, 400.0, rtol=1e-12)
    assert D.var() < 1e-18 * window_totals(paths).var(axis=0).sum()


def test_exceedance_probabilities_hand_counts():
    s0 = np.array([[1.0, 2.0], [5.0, 2.0], [3.0, 9.0], [7.0, 1.0]])  # (S=4, h=2)
    paths = np.stack([s0, s0], axis=2)
    per, any_ = exceedance_probabilities(paths, np.array([4.0, np.nan]))
    np.testing.assert_array_equal(per, [[0.5, np.nan], [0.25, np.nan]])
    np.testing.assert_array_equal(any_, [0.75, np.nan])
    per, any_ = exceedance_probabilities(paths, np.array([4.0, np.nan]), below=True)
    np.testing.assert_array_equal(per, [[0.5, np.nan], [0.75, np.nan]])
    np.testing.assert_array_equal(any_, [1.0, np.nan])
    # thresholds by step; NaN steps are skipped by the any-step share
    per, any_ = exceedance_probabilities(paths, np.array([[4.0, np.nan], [np.nan, 8.0]]))
    np.testing.assert_array_equal(per, [[0.5, np.nan], [np.nan, 0.25]])
    np.testing.assert_array_equal(any_, [0.5, 0.25])


def test_any_step_exceedance_is_at_least_every_step():
    paths = np.random.default_rng(10).normal(size=(2_000, 8, 3)).cumsum(axis=1)
    per, any_ = exceedance_probabilities(paths, np.array([1.0, 2.0, -1.0]))
    assert per.shape == (8, 3) and any_.shape == (3,)
    assert np.all(any_ >= per.max(axis=0))


# --- replenishment advice ---------------------------------------------------------------

D100 = np.arange(1.0, 101.0)  # demand 1..100, one draw each


def test_replenishment_advice_hand_checkable():
    adv = replenishment_advice(D100, on_hand=50, on_order=20, backorders=5,
                               service_level=0.9)
    assert isinstance(adv, ReplenishmentAdvice)
    assert adv.reorder_point == 90.0  # smallest d with #{D <= d} >= 90
    assert adv.mean_demand == 50.5 and adv.safety_stock == 39.5
    assert adv.demand_quantiles == (5.0, 50.0, 95.0)
    assert adv.inventory_position == 65.0  # 50 + 20 - 5
    assert adv.suggested_order == 25.0  # 90 - 65
    assert adv.stockout_probability == 0.35  # 66..100
    assert adv.expected_shortage == pytest.approx(6.3, abs=1e-12)  # (1 + ... + 35) / 100
    assert adv.cycle_service_level == 0.9
    assert adv.fill_rate is None and adv.draws == 100
    assert adv.target == "service_level" and adv.target_value == 0.9


def test_replenishment_advice_fill_rate_target_and_lot_rounding():
    # E[(D - 90)^+] = (1 + ... + 10) / 100 = 0.55 = (1 - 0.945) * 10, so s = 90
    adv = replenishment_advice(D100, on_hand=65, fill_rate=0.945, order_quantity=10)
    assert adv.reorder_point == pytest.approx(90.0, abs=1e-12)
    assert adv.fill_rate == pytest.approx(0.945, abs=1e-12)
    assert adv.suggested_order == 30.0  # shortfall 25 rounded up to 3 lots of 10
    # the service-level target with a lot size reports the achieved fill rate
    adv = replenishment_advice(D100, on_hand=65, service_level=0.9, order_quantity=10)
    assert adv.fill_rate == pytest.approx(0.945, abs=1e-12)
    # position above the reorder point: no order
    adv = replenishment_advice(D100, on_hand=80, on_order=30, service_level=0.9)
    assert adv.suggested_order == 0.0 and adv.stockout_probability == 0.0


@pytest.mark.parametrize(("kwargs", "match"), [
    ({"service_level": 0.9, "fill_rate": 0.9, "order_quantity": 10}, "exactly one"),
    ({}, "exactly one"),
    ({"fill_rate": 0.95}, "needs order_quantity"),
    ({"fill_rate": 0.95, "order_quantity": 0}, "order_quantity must be > 0"),
    ({"service_level": 1.0}, "service_level must lie strictly between 0 and 1"),
    ({"service_level": 0.0}, "service_level must lie strictly between 0 and 1"),
    ({"fill_rate": 1.2, "order_quantity": 5}, "fill_rate must lie strictly"),
    ({"service_level": 0.9, "backorders": -1}, "backorders must be a finite number >= 0"),
    ({"service_level": 0.9, "on_order": np.nan}, "on_order must be a finite number"),
    ({"service_level": 0.9, "levels": (0.5, 1.5)}, "quantile level"),
])
def test_replenishment_advice_rejects_bad_arguments(kwargs, match):
    with pytest.raises(SpecificationError, match=match):
        replenishment_advice(D100, on_hand=kwargs.pop("on_hand", 10), **kwargs)
    with pytest.raises(SpecificationError, match="on_hand must be a finite number >= 0"):
        replenishment_advice(D100, on_hand=-1, service_level=0.9)


def test_bad_shapes_and_windows_are_rejected():
    paths = np.zeros((10, 4, 2))
    for start, end in [(0, None), (2, 5), (3, 2)]:
        with pytest.raises(SpecificationError, match="1 <= start <= end <= h = 4"):
            window_totals(paths, start, end)
    with pytest.raises(SpecificationError, match="one entry per series"):
        window_totals(paths, weights=[1.0, 1.0, 1.0])
    with pytest.raises(SpecificationError, match=r"paths \(S, h, n\) must be"):
        window_totals(np.zeros((10, 4)))
    with pytest.raises(SpecificationError, match="window_totals"):
        reorder_point(np.zeros((10, 2)), 0.9)
    with pytest.raises(SpecificationError, match="finite"):
        expected_shortage(np.array([1.0, np.nan]), 1.0)
    with pytest.raises(SpecificationError, match="thresholds must have shape"):
        exceedance_probabilities(paths, np.zeros(3))
    with pytest.raises(SpecificationError, match=r"n_det \+ n \* lags"):
        lead_time_covariance(np.zeros((4, 2)), np.eye(2), 1, 2, 3)
    with pytest.raises(SpecificationError, match="symmetric"):
        lead_time_covariance(np.zeros((3, 1)), np.eye(2), 1, 2, 3)
    with pytest.raises(SpecificationError, match="not a stack of draws"):
        lead_time_covariance(np.zeros((5, 2, 1)), AR1_SIGMA, 1, 1, 3)
    with pytest.raises(SpecificationError, match="lead_time must be >= 1"):
        lead_time_covariance(AR1_B, AR1_SIGMA, 1, 1, 0)


def test_lead_time_covariance_at_the_posterior_mean_of_a_fitted_var():
    # The check on a fitted model: Lutkepohl (2005) example data E1 (West German
    # investment, income, consumption, 1960Q1-1978Q4, in levels; tests/data/e1.dat),
    # Minnesota VAR(2). Holding theta at the posterior mean (B_bar, E[Sigma]), the
    # simulated covariance of the 4-quarter sums equals sum_s C_s Sigma C_s'
    # (methods brief sec. 12) within Monte Carlo error (normal D: s.e. as above).
    from pathlib import Path

    from priors.model import FanfoldVAR

    e1 = Path(__file__).resolve().parents[1] / "data" / "e1.dat"
    levels = np.loadtxt(e1, skiprows=7)[:76]
    model = FanfoldVAR(lags=2, tightness=0.2).fit(levels, names=["inv", "inc", "cons"])
    B, Sig = model.posterior_.B, model.posterior_.sigma_mean()
    S, L = 200_000, 4
    paths = _fixed_parameter_paths(B, Sig, levels[-2:], L, S, seed=11)
    V = lead_time_covariance(B, Sig, n_det=1, lags=2, lead_time=L)
    se = np.sqrt((np.outer(np.diag(V), np.diag(V)) + V**2) / S)
    assert np.all(np.abs(np.cov(window_totals(paths), rowvar=False) - V) < Z * se)
