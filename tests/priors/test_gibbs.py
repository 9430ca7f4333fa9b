"""The Gibbs sampler for the independent Normal-inverse-Wishart VAR.

References:
- Carriero, Clark & Marcellino (2019), J. Econometrics 212(1), and the corrigendum of
  Carriero, Chan, Clark & Marcellino (2022), J. Econometrics 227(2): drawing the
  coefficients equation by equation must reproduce the exact joint conditional
  vec(B) | Sigma ~ N(P^-1 r, P^-1), P = diag(1/vec V) + Sigma^-1 (x) X'X; the uncorrected
  triangular scheme (each equation's own structural equation only) must fail that check.
- Geweke (2004), "Getting it right", JASA 99: the marginal-conditional and
  successive-conditional simulators agree in the moments of test functions.
False alarms: fixed seeds; z-tests Bonferroni-corrected to a family-wise 1e-3
(|z| > 4.06 for up to 20 tests, methods brief sec. 10).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import solve_triangular

from priors.conjugate import posterior
from priors.data import Design, Deterministics, build_design, load_series
from priors.errors import SpecificationError
from priors.gibbs import (
    GibbsSettings,
    IndependentPrior,
    draw_coefficients,
    draw_sigma,
    independent_minnesota_prior,
    init_state,
    precompute,
    run_chains,
)
from priors.shrinkage import MinnesotaHyper, minnesota_prior

Z_BONF = 4.06


def _simulate(n=3, p=1, T=40, seed=0, correlated=True):
    """A stationary VAR(1) with cross effects and (by default) correlated shocks
    (simulation; the truth is only used to make data)."""
    rng = np.random.default_rng(seed)
    A = np.array([[0.5, 0.2, 0.0], [0.3, 0.4, -0.2], [0.0, 0.25, 0.6]])[:n, :n]
    cov = np.array([[1.0, 0.6, 0.3], [0.6, 1.5, 0.5], [0.3, 0.5, 2.0]])[:n, :n]
    L = np.linalg.cholesky(cov if correlated else np.diag(np.diag(cov)))
    y = np.zeros((T + 50, n))
    for t in range(1, T + 50):
        y[t] = 1.0 + A @ y[t - 1] + L @ rng.standard_normal(n)
    return y[50:]


def _design(y, p=1):
    return build_design(load_series(y), p, Deterministics(constant=True))


def _batch_means_se(x, batches=50):
    """Standard error of the mean of a (chains, draws, ...) series by batch means."""
    C, D = x.shape[:2]
    b = x[:, : D // batches * batches].reshape(C, batches, D // batches, *x.shape[2:]).mean(2)
    return b.reshape(C * batches, *x.shape[2:]).std(axis=0, ddof=1) / np.sqrt(C * batches)


def _exact_conditional(pre, Sigma):
    """Mean and covariance of vec(B) | Sigma (columns stacked), by brute force."""
    k, n = pre.XtY.shape
    W = np.linalg.inv(Sigma)
    V = (pre.wh**2).T  # (k, n)
    P = np.diag(1.0 / V.T.ravel()) + np.kron(W, pre.XtX)
    r = (pre.prior_rhs + pre.XtY @ W).T.ravel()
    cov = np.linalg.inv(P)
    return cov @ r, cov


def _uncorrected(z, B, Sigma, pre, Y, X):
    """The triangular step without the correction: equation i sees only its own
    structural equation y_i + sum_{j<i} a_ij e_j = X beta_i + sqrt(d_i) eps_i."""
    Lc = np.linalg.cholesky(Sigma)
    dsq = np.diag(Lc)
    A = solve_triangular(Lc / dsq, np.eye(len(dsq)), lower=True)  # unit lower triangular
    d = dsq**2
    B = B.copy()
    V = (pre.wh**2).T
    for i in range(B.shape[1]):
        E = Y - X @ B
        ystar = Y[:, i] + E[:, :i] @ A[i, :i]
        P = np.diag(1.0 / V[:, i]) + X.T @ X / d[i]
        rhs = pre.prior_rhs[:, i] + X.T @ ystar / d[i]
        Lp = np.linalg.cholesky(P)
        mean = np.linalg.solve(P, rhs)
        B[:, i] = mean + solve_triangular(Lp.T, z[i], lower=False)
    return B


@pytest.fixture(scope="module")
def small():
    y = _simulate(T=40)
    design = _design(y)
    hyper = MinnesotaHyper(tightness=0.3, cross=0.5)
    prior = independent_minnesota_prior(design, hyper, np.ones(3))
    pre = precompute(design, prior)
    Sigma = np.array([[1.0, 0.7, 0.3], [0.7, 1.5, 0.6], [0.3, 0.6, 2.0]])
    return design, pre, Sigma


def test_equation_by_equation_draws_match_the_exact_joint_conditional(small):
    # Sigma held fixed: the coefficient block of the sampler must have the exact
    # N(P^-1 r, P^-1) of vec(B) | Sigma as its stationary law (CCM 2019 as corrected by
    # CCCM 2022).
    design, pre, Sigma = small
    mean, cov = _exact_conditional(pre, Sigma)
    C, D = 4, 4000
    rngs = np.random.default_rng(1).spawn(C)
    k, n = pre.XtY.shape
    state = init_state(pre, np.zeros((C, k, n)), np.repeat(Sigma[None], C, axis=0))
    W = np.repeat(np.linalg.inv(Sigma)[None], C, axis=0)
    B, G = state.B, state.G
    out = np.empty((C, D, k * n))
    for s in range(D + 200):
        z = np.stack([r.standard_normal((n, k)) for r in rngs])
        B, G = draw_coefficients(z, B, G, W, pre)
        if s >= 200:
            out[:, s - 200] = B.transpose(0, 2, 1).reshape(C, -1)  # vec: columns stacked
    z_mean = (out.mean(axis=(0, 1)) - mean) / _batch_means_se(out)
    assert np.all(np.abs(z_mean) < Z_BONF), z_mean
    sd = np.sqrt(np.diag(cov))
    emp_sd = out.reshape(-1, k * n).std(axis=0)
    # sd of a sample sd ~ sd / sqrt(2 ESS); ESS >= D here for this well-mixed block
    assert np.all(np.abs(emp_sd / sd - 1) < 0.05), emp_sd / sd
    corr = np.corrcoef(out.reshape(-1, k * n), rowvar=False)
    exact_corr = cov / np.outer(sd, sd)
    assert np.abs(corr - exact_corr).max() < 0.05


def test_the_uncorrected_triangular_scheme_fails_the_same_check(small):
    # Mutation check: the scheme without the correction has the wrong stationary law
    # (with correlated shocks its means are off by a sizeable fraction of a posterior
    # s.d., far beyond Monte Carlo error: ~0.03 s.d. here), so the test above has power.
    design, pre, Sigma = small
    mean, cov = _exact_conditional(pre, Sigma)
    rng = np.random.default_rng(2)
    k, n = pre.XtY.shape
    B = np.zeros((k, n))
    X, Y = design.X, design.Y
    out = []
    for s in range(3200):
        B = _uncorrected(rng.standard_normal((n, k)), B, Sigma, pre, Y, X)
        if s >= 200:
            out.append(B.T.ravel())
    out = np.asarray(out)
    shift = np.abs(out.mean(axis=0) - mean) / np.sqrt(np.diag(cov))
    assert shift.max() > 0.3, shift


def test_close_to_the_conjugate_posterior_when_cross_tightness_is_one():
    # With cross = own tightness, the independent prior's variance omega * psi_i equals
    # the conjugate prior's conditional variance omega * Sigma_ii when psi_i = Sigma_ii.
    # With the scales psi set to the VAR's residual variances and a long sample (Sigma
    # concentrated there), the two posteriors' means agree within Monte Carlo error plus
    # a small allowance for the remaining difference in prior form. The conjugate prior
    # also correlates coefficients across equations through Sigma's off-diagonal terms;
    # with uncorrelated shocks that difference vanishes too.
    y = _simulate(T=400, seed=5, correlated=False)
    design = _design(y, p=2)
    resid = design.Y - design.X @ np.linalg.lstsq(design.X, design.Y, rcond=None)[0]
    psi = np.diag(resid.T @ resid) / (design.nobs - design.k)
    hyper = MinnesotaHyper(tightness=0.2)
    prior = independent_minnesota_prior(design, hyper, np.ones(3), psi)
    conj = posterior(design, minnesota_prior(design, hyper, np.ones(3), psi))
    pre = precompute(design, prior)
    draws = run_chains(np.random.default_rng(3), pre, conj.B, conj.sigma_mean(),
                       GibbsSettings(chains=4, burn=200, keep=1500))
    B = draws.B.astype(np.float64)
    mc_se = _batch_means_se(B)
    post_sd = B.reshape(-1, *B.shape[2:]).std(axis=0)
    diff = np.abs(B.mean(axis=(0, 1)) - conj.B)
    assert np.all(diff < Z_BONF * mc_se + 0.1 * post_sd), (diff / post_sd).max()
    S = draws.Sigma.astype(np.float64).mean(axis=(0, 1))
    scale = np.sqrt(np.outer(np.diag(S), np.diag(S)))
    assert np.all(np.abs(S - conj.sigma_mean()) < 0.05 * scale)


def _geweke_prior(n=2):
    k = 1 + n
    B0 = np.zeros((k, n))
    B0[1:, :] = 0.3 * np.eye(n)
    V = np.full((k, n), 0.04)
    V[0] = 0.25
    df = n + 6.0
    return IndependentPrior(B0, V, np.eye(n) * (df - n - 1), df, np.empty((0, n)),
                            np.empty((0, k)))


def _draw_theta(rng, prior):
    k, n = prior.B0.shape
    B = prior.B0 + np.sqrt(prior.V) * rng.standard_normal((k, n))
    from scipy.stats import invwishart

    Sigma = invwishart.rvs(df=prior.df, scale=prior.S0, random_state=rng)
    return B, np.atleast_2d(Sigma)


def _simulate_y(rng, B, Sigma, T, y0):
    n = Sigma.shape[0]
    L = np.linalg.cholesky(Sigma)
    y = np.empty((T + 1, n))
    y[0] = y0
    for t in range(1, T + 1):
        y[t] = B[0] + y[t - 1] @ B[1:] + L @ rng.standard_normal(n)
    return y


def _g(B, Sigma):
    """Test functions: coefficients, their squares, Sigma's elements and log|Sigma|."""
    b = B.ravel()
    return np.concatenate([b, b**2, Sigma[np.triu_indices(Sigma.shape[0])],
                           [np.linalg.slogdet(Sigma)[1]]])


@pytest.mark.slow
def test_geweke_joint_distribution_test():
    # Geweke (2004): n = 2, p = 1, T = 12, proper informative prior; 30,000 draws from
    # each simulator; 16 test functions, family-wise false-alarm rate 1e-3.
    prior = _geweke_prior()
    T, y0, M = 12, np.zeros(2), 30_000
    rng = np.random.default_rng(11)
    mc = np.array([_g(*_draw_theta(rng, prior)) for _ in range(M)])
    B, Sigma = _draw_theta(rng, prior)
    gens = rng.spawn(1)
    sc = np.empty_like(mc)
    for m in range(M):
        y = _simulate_y(rng, B, Sigma, T, y0)
        X = np.column_stack([np.ones(T), y[:-1]])
        pre = precompute(Design(y[1:], X, 1, 1, ("const", "a", "b"), ("a", "b")), prior)
        state = init_state(pre, B[None], Sigma[None])
        z = gens[0].standard_normal((1, 2, 3))
        Bn, G = draw_coefficients(z, state.B, state.G, np.linalg.inv(state.Sigma), pre)
        Sigma = draw_sigma(gens, Bn, G, pre)[0]
        B = Bn[0]
        sc[m] = _g(B, Sigma)
    # long-run variance of the successive-conditional sequence by batch means
    batches = 100
    b = sc[: M // batches * batches].reshape(batches, -1, sc.shape[1]).mean(axis=1)
    se = np.sqrt(mc.var(axis=0, ddof=1) / M + b.var(axis=0, ddof=1) / batches)
    z = (mc.mean(axis=0) - sc.mean(axis=0)) / se
    assert np.all(np.abs(z) < 4.16), z  # 16 tests: Bonferroni 1e-3 / 16 two-sided


def test_settings_and_inputs_are_checked():
    with pytest.raises(SpecificationError, match="chains"):
        GibbsSettings(chains=0)
    with pytest.raises(SpecificationError, match="thin"):
        GibbsSettings(thin=0)
    design = _design(_simulate(T=30))
    prior = independent_minnesota_prior(design, MinnesotaHyper(), np.ones(3))
    bad = IndependentPrior(prior.B0, -prior.V, prior.S0, prior.df, prior.Yd, prior.Xd)
    with pytest.raises(SpecificationError, match="positive"):
        precompute(design, bad)


def test_chains_are_reproducible_and_independent_of_worker_count():
    design = _design(_simulate(T=60, seed=9))
    prior = independent_minnesota_prior(design, MinnesotaHyper(tightness=0.3, cross=0.5),
                                        np.ones(3))
    pre = precompute(design, prior)
    start_B = np.linalg.lstsq(design.X, design.Y, rcond=None)[0]
    settings = GibbsSettings(chains=2, burn=5, keep=20, thin=2)
    one = run_chains(np.random.default_rng(4), pre, start_B, np.eye(3), settings)
    again = run_chains(np.random.default_rng(4), pre, start_B, np.eye(3), settings)
    np.testing.assert_array_equal(one.B, again.B)
    assert one.B.shape == (2, 20, 4, 3) and one.B.dtype == np.float32
    two = run_chains(np.random.default_rng(4), pre, start_B, np.eye(3),
                     GibbsSettings(chains=2, burn=5, keep=20, thin=2, workers=2))
    np.testing.assert_allclose(two.B, one.B, rtol=1e-5, atol=1e-6)
    assert not np.allclose(one.B[0], one.B[1])  # the chains have their own streams
    seen = []
    run_chains(np.random.default_rng(4), pre, start_B, np.eye(3), settings,
               progress=lambda done, total: seen.append((done, total)))
    assert seen[-1] == (2 * settings.sweeps, 2 * settings.sweeps)


# ------------------------------------------------------------------ outlier periods
def test_low_rank_weighted_draw_matches_the_exact_weighted_conditional(small):
    # With shock scales fixed, rows in outlier periods are divided by their scale; the
    # equation-by-equation draw with the rank-r correction (priors/outliers.py) must have
    # the exact law of vec(B) | Sigma, scales on the reweighted data.
    design, _, Sigma = small
    prior = independent_minnesota_prior(design, MinnesotaHyper(tightness=0.3, cross=0.5),
                                        np.ones(3))
    pre = precompute(design, prior, outliers=[[10, 11, 12], [30]])
    v = np.array([0.09, 0.3])  # scales 3.33 and 1.83
    w_rows = np.ones(design.nobs)
    w_rows[[10, 11, 12]], w_rows[30] = v[0], v[1]
    Xw, Yw = design.X * np.sqrt(w_rows)[:, None], design.Y * np.sqrt(w_rows)[:, None]
    k, n = pre.XtY.shape
    W = np.linalg.inv(Sigma)
    V = prior.V
    P = np.diag(1.0 / V.T.ravel()) + np.kron(W, Xw.T @ Xw)
    cov = np.linalg.inv(P)
    mean = cov @ (prior.B0 / V + Xw.T @ Yw @ W).T.ravel()
    from priors.outliers import weighted_cross_products

    C, D = 4, 3000
    d = np.repeat((1.0 - v[pre.out.period])[None], C, axis=0)
    XtY, _ = weighted_cross_products(pre.XtX, pre.XtY, pre.YtY, pre.out, d)
    B = np.zeros((C, k, n))
    G = np.einsum("kj,cjn->ckn", Xw.T @ Xw, B)
    Wc = np.repeat(W[None], C, axis=0)
    rngs = np.random.default_rng(8).spawn(C)
    out = np.empty((C, D, k * n))
    for s in range(D + 200):
        z = np.stack([r.standard_normal((n, k)) for r in rngs])
        B, G = draw_coefficients(z, B, G, Wc, pre, XtY, d)
        if s >= 200:
            out[:, s - 200] = B.transpose(0, 2, 1).reshape(C, -1)
    np.testing.assert_allclose(G, np.einsum("kj,cjn->ckn", Xw.T @ Xw, B), rtol=1e-8,
                               atol=1e-8)
    z_mean = (out.mean(axis=(0, 1)) - mean) / _batch_means_se(out)
    assert np.all(np.abs(z_mean) < Z_BONF), z_mean
    ratio = out.reshape(-1, k * n).std(axis=0) / np.sqrt(np.diag(cov))
    assert np.all(np.abs(ratio - 1) < 0.05), ratio


def test_a_known_shock_scale_jump_is_recovered():
    # Simulated data with the shocks of one 3-month period multiplied by 4 (and a
    # control period with no jump): the scale's 90% credible interval covers 4 and
    # excludes 1; the control period's covers 1.
    rng = np.random.default_rng(21)
    T, n = 240, 2
    A = np.array([[0.5, 0.2], [0.1, 0.4]])
    L = np.linalg.cholesky(np.array([[1.0, 0.3], [0.3, 1.0]]))
    y = np.zeros((T, n))
    for t in range(1, T):
        scale = 4.0 if 150 <= t < 153 else 1.0
        y[t] = 0.5 + A @ y[t - 1] + scale * (L @ rng.standard_normal(n))
    design = _design(y)
    prior = independent_minnesota_prior(design, MinnesotaHyper(tightness=0.5), np.zeros(2))
    # design row r is data row r + 1 (one lag)
    pre = precompute(design, prior, outliers=[[149, 150, 151], [60, 61, 62]])
    ols = np.linalg.lstsq(design.X, design.Y, rcond=None)[0]
    draws = run_chains(np.random.default_rng(5), pre, ols, np.eye(2),
                       GibbsSettings(chains=4, burn=300, keep=1500))
    s = draws.scales.reshape(-1, 2).astype(np.float64)
    lo, hi = np.quantile(s[:, 0], [0.05, 0.95])
    assert lo < 4.0 < hi and lo > 1.5, (lo, hi)
    assert np.quantile(s[:, 1], 0.05) < 1.05 and np.quantile(s[:, 1], 0.95) < 3.0


# ------------------------------------------------------------------ sampled tightness
@pytest.mark.slow
def test_geweke_with_sampled_tightness_and_cross_tightness():
    # Geweke (2004) again, now with lambda and theta drawn from their Gamma hyperpriors in
    # the marginal-conditional simulator and updated by the Metropolis step in the
    # successive-conditional one; test functions add lambda and theta. 20 tests,
    # family-wise 1e-3 (|z| < 4.06).
    from priors.gibbs import sweep, with_variances
    from priors.hyper_mh import HyperSampler, gamma_from_mode_sd

    n, k, T, M = 2, 3, 12, 40_000
    base = _geweke_prior()
    hyper = HyperSampler(V_det=np.full((1, n), 0.25), lag_base=np.full((n, n), 0.04),
                         own=np.eye(n, dtype=bool), B0=base.B0,
                         tightness=gamma_from_mode_sd(1.0, 0.5),
                         cross=gamma_from_mode_sd(0.8, 0.5), step=0.5)
    rng = np.random.default_rng(13)
    from scipy.stats import invwishart

    def draw_joint():
        lam = rng.gamma(hyper.tightness.shape, hyper.tightness.scale)
        theta = rng.gamma(hyper.cross.shape, hyper.cross.scale)
        B = hyper.B0 + np.sqrt(hyper.variances(lam, theta)) * rng.standard_normal((k, n))
        Sigma = np.atleast_2d(invwishart.rvs(df=base.df, scale=base.S0, random_state=rng))
        return B, Sigma, lam, theta

    def g(B, Sigma, lam, theta):
        return np.concatenate([_g(B, Sigma), [lam, theta]])

    mc = np.array([g(*draw_joint()) for _ in range(M)])
    B, Sigma, lam, theta = draw_joint()
    gens = rng.spawn(1)
    sc = np.empty_like(mc)
    for m in range(M):
        y = _simulate_y(rng, B, Sigma, T, np.zeros(2))
        X = np.column_stack([np.ones(T), y[:-1]])
        design = Design(y[1:], X, 1, 1, ("const", "a", "b"), ("a", "b"))
        pre = with_variances(precompute(design, base), hyper.variances(lam, theta), hyper.B0)
        st = sweep(gens, init_state(pre, B[None], Sigma[None]), pre)
        B, Sigma = st.B[0], st.Sigma[0]
        lams, thetas, _ = hyper.step_all(gens, st.B, np.array([lam]), np.array([theta]))
        lam, theta = float(lams[0]), float(thetas[0])
        sc[m] = g(B, Sigma, lam, theta)
    batches = 100
    b = sc[: M // batches * batches].reshape(batches, -1, sc.shape[1]).mean(axis=1)
    se = np.sqrt(mc.var(axis=0, ddof=1) / M + b.var(axis=0, ddof=1) / batches)
    z = (mc.mean(axis=0) - sc.mean(axis=0)) / se
    assert np.all(np.abs(z) < Z_BONF), z


def test_gamma_hyperprior_from_mode_and_sd():
    # Check value 14 of the methods brief (GLP 2015: mode 0.2, s.d. 0.4)
    from priors.hyper_mh import gamma_from_mode_sd

    g = gamma_from_mode_sd(0.2, 0.4)
    assert g.shape == pytest.approx(1.640388, abs=1e-6)
    assert g.scale == pytest.approx(0.312311, abs=1e-6)
    g = gamma_from_mode_sd(1.0, 1.0)
    assert (g.shape, g.scale) == (pytest.approx(2.618034, abs=1e-6),
                                  pytest.approx(0.618034, abs=1e-6))
