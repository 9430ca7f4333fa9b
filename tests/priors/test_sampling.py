"""Exact i.i.d. NIW sampler against closed-form moments, SBC and the n = 1 NIG case."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from priors.conjugate import posterior
from priors.data import Deterministics, build_design, load_series
from priors.model import FanfoldVAR
from priors.sampling import draw_sigma_roots, sample_posterior
from priors.shrinkage import NIWPrior

from .helpers import FIXED, design_and_prior

# Bonferroni: family-wise false-alarm rate 1e-3 over K two-sided z-tests (methods sec. 10)
ALPHA = 1e-3


def _z_crit(K: int) -> float:
    return float(stats.norm.ppf(1 - ALPHA / (2 * K)))


def test_draw_moments_match_closed_form(known_var, rng):
    # Kadiyala & Karlsson (1997): E[B] = B_bar, Var(B_ri) = P^-1_rr S_ii / (nu - n - 1),
    # E[Sigma] = S / (nu - n - 1); inverse-Wishart variances (Press 1982) for Sigma.
    y = known_var.simulate(rng, 70)
    design, prior = design_and_prior(y[:, :2], lags=1)
    post = posterior(design, prior)
    S_draws = 20_000
    draws = sample_posterior(np.random.default_rng(7), post, S_draws)
    n, nu, S = post.n, post.df, post.S
    var_B = np.outer(post.row_cov_diag(), np.diag(S)) / (nu - n - 1)
    z_B = (draws.B.mean(0) - post.B) / np.sqrt(var_B / S_draws)
    d = nu - n
    var_Sig = ((d + 1) * S**2 + (d - 1) * np.outer(np.diag(S), np.diag(S))) / (
        d * (d - 1) ** 2 * (d - 3))
    z_Sig = (draws.Sigma.mean(0) - S / (d - 1)) / np.sqrt(var_Sig / S_draws)
    K = z_B.size + z_Sig.size
    assert np.abs(z_B).max() < _z_crit(K)
    assert np.abs(z_Sig).max() < _z_crit(K)
    # variances of B within 5% (about 5 Monte Carlo s.e. at 20,000 draws)
    np.testing.assert_allclose(draws.B.var(0), var_B, rtol=0.05)
    # full covariance of vec B equals E[Sigma] (x) P^-1
    Omega = np.linalg.inv(post.R.T @ post.R)
    expected = np.kron(S / (d - 1), Omega)
    vecB = draws.B.transpose(0, 2, 1).reshape(S_draws, -1)
    got = np.cov(vecB, rowvar=False)
    assert np.linalg.norm(got - expected) / np.linalg.norm(expected) < 0.05


def test_sigma_roots_square_to_inverse_wishart_draws():
    rng = np.random.default_rng(1)
    S = np.array([[2.0, 0.5], [0.5, 1.0]])
    M = draw_sigma_roots(rng, S, 9.0, 40_000)
    Sigma = M @ np.swapaxes(M, 1, 2)
    # scipy.stats.invwishart as the reference: KS test on Sigma_11 (alpha 1e-3)
    ref = stats.invwishart(df=9.0, scale=S)
    p = stats.kstest(Sigma[:, 0, 0], lambda x: stats.invgamma(
        (9.0 - 1) / 2, scale=S[0, 0] / 2).cdf(x)).pvalue
    assert p > ALPHA
    np.testing.assert_allclose(Sigma.mean(0), ref.mean(), rtol=0.03)


def test_simulation_based_calibration_of_exact_sampler():
    # Talts et al. (2018): rank of the true value among L posterior draws is uniform on
    # {0..L}. 300 replications, L = 99, 10 bins of 10 ranks; chi-square per test
    # function with Bonferroni over 10 functions at family-wise alpha 1e-3.
    rng = np.random.default_rng(2026)
    n, T, reps, L, bins = 2, 25, 300, 99, 10
    k = 1 + n
    B0 = np.zeros((k, n))
    B0[1:, :] = 0.3 * np.eye(n)
    omega = np.array([1.0, 0.04, 0.04])
    df0 = n + 4.0
    S0 = np.eye(n) * (df0 - n - 1)
    prior = NIWPrior(B0, omega, S0, df0, np.empty((0, n)), np.empty((0, k)))
    ranks = np.zeros((reps, k * n + 4), dtype=int)
    for r in range(reps):
        Sigma = stats.invwishart(df=df0, scale=S0).rvs(random_state=rng)
        Lc = np.linalg.cholesky(Sigma)
        B = B0 + np.sqrt(omega)[:, None] * rng.standard_normal((k, n)) @ Lc.T
        y = np.zeros((T + 1, n))
        for t in range(1, T + 1):
            y[t] = B[0] + B[1:].T @ y[t - 1] + Lc @ rng.standard_normal(n)
        design = build_design(load_series(y), 1, Deterministics())
        draws = sample_posterior(rng, posterior(design, prior), L)

        def funcs(Bs, Ss):
            Bs, Ss = np.atleast_3d(Bs), Ss
            return np.column_stack([
                Bs.reshape(Bs.shape[0], -1), Ss[:, 0, 0], Ss[:, 1, 1], Ss[:, 0, 1],
                np.linalg.slogdet(Ss)[1]])

        truth = funcs(B[None], Sigma[None])[0]
        ranks[r] = (funcs(draws.B, draws.Sigma) < truth).sum(axis=0)
    counts = np.stack([np.bincount(ranks[:, j] * bins // (L + 1), minlength=bins)
                       for j in range(ranks.shape[1])])
    chi2 = ((counts - reps / bins) ** 2 / (reps / bins)).sum(axis=1)
    crit = stats.chi2.ppf(1 - ALPHA / ranks.shape[1], bins - 1)
    assert chi2.max() < crit, chi2


def test_univariate_case_matches_normal_inverse_gamma_posterior(rng):
    # n = 1: the NIW posterior is the conjugate normal-inverse-gamma AR(p) posterior
    # (e.g. Koop 2003, Bayesian Econometrics, ch. 3), with scipy.stats as the oracle.
    e = rng.standard_normal(150)
    y = np.zeros(150)
    for t in range(2, 150):
        y[t] = 1.0 + 0.5 * y[t - 1] - 0.2 * y[t - 2] + e[t]
    model = FanfoldVAR(lags=2, tightness=0.3, **FIXED).fit(y[:, None])
    prior, X, Y = model.prior_, model.design_.X, model.design_.Y[:, 0]
    V0i = np.diag(1.0 / prior.omega)
    b0 = prior.B0[:, 0]
    a0, bb0 = prior.df / 2, prior.S0[0, 0] / 2
    Vbar = np.linalg.inv(V0i + X.T @ X)
    bbar = Vbar @ (V0i @ b0 + X.T @ Y)
    abar = a0 + len(Y) / 2
    bbbar = bb0 + 0.5 * (Y @ Y + b0 @ V0i @ b0 - bbar @ np.linalg.solve(Vbar, bbar))
    post = model.posterior_
    np.testing.assert_allclose(post.B[:, 0], bbar, rtol=1e-9)
    assert post.S[0, 0] / 2 == pytest.approx(bbbar, rel=1e-9)
    assert post.df / 2 == pytest.approx(abar)
    table = model.coefficients(level=0.9)
    marg = stats.t(df=2 * abar, loc=bbar, scale=np.sqrt(bbbar / abar * np.diag(Vbar)))
    np.testing.assert_allclose(table["lower"], marg.ppf(0.05), rtol=1e-8)
    np.testing.assert_allclose(table["upper"], marg.ppf(0.95), rtol=1e-8)
    np.testing.assert_allclose(table["sd"], marg.std(), rtol=1e-8)
    sig2 = model.sample(20_000, rng=np.random.default_rng(5)).Sigma[:, 0, 0]
    p = stats.kstest(sig2, stats.invgamma(abar, scale=bbbar).cdf).pvalue
    assert p > ALPHA


def test_same_seed_gives_bit_identical_draws(known_var, rng):
    design, prior = design_and_prior(known_var.simulate(rng, 50), lags=2)
    post = posterior(design, prior)
    a = sample_posterior(np.random.default_rng(3), post, 50)
    b = sample_posterior(np.random.default_rng(3), post, 50)
    assert np.array_equal(a.B, b.B) and np.array_equal(a.Sigma, b.Sigma)
