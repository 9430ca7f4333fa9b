"""Closed-form NIW posterior and marginal likelihood against outside references."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from priors.conjugate import (
    NIWPosterior,
    collinear_after_scaling,
    flat_posterior,
    log_marginal_likelihood,
    log_multigamma,
    posterior,
)
from priors.data import Design, Deterministics, build_design, load_series
from priors.errors import ExplosiveDataError, NotPositiveDefiniteError, TooFewObservationsError
from priors.shrinkage import MinnesotaHyper, NIWPrior, minnesota_prior

from .helpers import design_and_prior


def _log_joint(Y, X, B, Sigma, B0, Omega0, S0, df0):
    """log p(Y|B,Sigma) + log p(B,Sigma) with scipy.stats densities."""
    loglik = stats.multivariate_normal(np.zeros(Y.shape[1]), Sigma).logpdf(Y - X @ B).sum()
    logprior = stats.matrix_normal(B0, rowcov=Omega0, colcov=Sigma).logpdf(B)
    logprior += stats.invwishart(df=df0, scale=S0).logpdf(Sigma)
    return loglik + logprior


def _log_post(post: NIWPosterior, B, Sigma):
    rowcov = np.linalg.inv(post.R.T @ post.R)
    return (stats.matrix_normal(post.B, rowcov=rowcov, colcov=Sigma).logpdf(B)
            + stats.invwishart(df=post.df, scale=post.S).logpdf(Sigma))


def _chib(Y, X, prior: NIWPrior, post: NIWPosterior, rng, points=4):
    """Basic marginal likelihood identity (Chib 1995) at several parameter points."""
    out = []
    Omega0 = np.diag(prior.omega)
    for _ in range(points):
        Sigma = stats.invwishart(df=post.df, scale=post.S).rvs(random_state=rng)
        B = post.B + 0.1 * rng.standard_normal(post.B.shape)
        out.append(_log_joint(Y, X, B, Sigma, prior.B0, Omega0, prior.S0, prior.df)
                   - _log_post(post, B, Sigma))
    return np.array(out)


def test_log_ml_equals_chib_identity(known_var, rng):
    # Chib (1995): log p(Y) = log p(Y|B,S) + log p(B,S) - log p(B,S|Y) at any (B, S)
    y = known_var.simulate(rng, 60)
    design, prior = design_and_prior(y, lags=2)
    post = posterior(design, prior)
    values = _chib(design.Y, design.X, prior, post, rng)
    np.testing.assert_allclose(values, post.log_ml, rtol=0, atol=1e-8 * abs(post.log_ml))


def test_log_ml_with_dummies_equals_chib_on_augmented_data(known_var, rng):
    # GLP (2015): with dummy observations, log p(Y) = log p([Y; Yd]) - log p(Yd);
    # each term checked by Chib's identity.
    y = known_var.simulate(rng, 60) + 10.0
    design, prior = design_and_prior(y, lags=2, sum_coef=0.5, initial=2.0)
    assert prior.Yd.shape[0] == 3 + 1
    Ya, Xa = np.vstack([design.Y, prior.Yd]), np.vstack([design.X, prior.Xd])
    from priors.conjugate import _update

    full = _update(prior, Xa, Ya)
    dummies = _update(prior, prior.Xd, prior.Yd)
    chib_full = _chib(Ya, Xa, prior, full, rng, points=2)
    chib_dummies = _chib(prior.Yd, prior.Xd, prior, dummies, rng, points=2)
    lml = log_marginal_likelihood(design, prior)
    np.testing.assert_allclose(chib_full - chib_dummies, lml, atol=1e-8 * abs(lml))


def test_log_ml_equals_sum_of_one_step_predictive_t_densities(known_var, rng):
    # Sequential form: p(Y) = prod_t p(y_t | y_1..t-1), each a multivariate t
    # (Zellner 1971; methods brief sec. 3(b)); scipy.stats.multivariate_t is the oracle.
    y = known_var.simulate(rng, 40)
    design, prior = design_and_prior(y, lags=1)
    n = design.n
    B, P, S, df = prior.B0, np.diag(1.0 / prior.omega), prior.S0.copy(), prior.df
    total = 0.0
    for t in range(design.nobs):
        x, yt = design.X[t], design.Y[t]
        Omega = np.linalg.inv(P)
        dof = df - n + 1
        shape = (1.0 + x @ Omega @ x) * S / dof
        total += stats.multivariate_t(loc=B.T @ x, shape=shape, df=dof).logpdf(yt)
        P_new = P + np.outer(x, x)
        B_new = np.linalg.solve(P_new, P @ B + np.outer(x, yt))
        S = S + np.outer(yt, yt) + B.T @ P @ B - B_new.T @ P_new @ B_new
        P, B, df = P_new, B_new, df + 1
    assert log_marginal_likelihood(design, prior) == pytest.approx(total, rel=1e-9)


def test_posterior_mean_is_ridge_like_formula(known_var, rng):
    # Kadiyala & Karlsson (1997): B_bar = (Omega0^-1 + X'X)^-1 (Omega0^-1 B0 + X'Y)
    y = known_var.simulate(rng, 80)
    design, prior = design_and_prior(y, lags=2)
    post = posterior(design, prior)
    Oi = np.diag(1.0 / prior.omega)
    expected = np.linalg.solve(Oi + design.X.T @ design.X, Oi @ prior.B0 + design.X.T @ design.Y)
    np.testing.assert_allclose(post.B, expected, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(post.R.T @ post.R, Oi + design.X.T @ design.X, rtol=1e-9)
    assert post.df == prior.df + design.nobs
    E = design.Y - design.X @ expected
    S = prior.S0 + E.T @ E + (expected - prior.B0).T @ Oi @ (expected - prior.B0)
    np.testing.assert_allclose(post.S, S, rtol=1e-9)


def test_flat_prior_reproduces_statsmodels_ols_on_macrodata():
    # Reference library and open dataset: statsmodels' VAR OLS on US macrodata
    # (log real GDP, consumption, investment), VAR(2) with constant.
    import statsmodels.api as sm
    from statsmodels.tsa.api import VAR

    data = sm.datasets.macrodata.load_pandas().data
    y = np.log(data[["realgdp", "realcons", "realinv"]].to_numpy())
    design = build_design(load_series(y), 2, Deterministics())
    post = flat_posterior(design)
    ref = VAR(y).fit(2, trend="c")
    np.testing.assert_allclose(post.B, ref.params, rtol=1e-8, atol=1e-10)
    dof = design.nobs - design.k
    np.testing.assert_allclose(post.S / dof, ref.sigma_u, rtol=1e-8)
    assert post.df == dof


def test_flat_prior_needs_enough_rows():
    y = np.random.default_rng(0).standard_normal((12, 3))
    design = build_design(load_series(y), 2, Deterministics())
    with pytest.raises(TooFewObservationsError, match="flat prior"):
        flat_posterior(design)


def test_collinear_regressors_raise_not_positive_definite():
    y = np.random.default_rng(0).standard_normal((40, 2))
    y = np.column_stack([y, y[:, 0]])  # third series duplicates the first
    design = build_design(load_series(y), 1, Deterministics())
    with pytest.raises(NotPositiveDefiniteError, match="collinear"):
        flat_posterior(design)


def _var1_design(y: np.ndarray, names: tuple[str, ...]) -> Design:
    """VAR(1) with constant on (T, n) ``y``, built by hand: no load_series validation."""
    X = np.column_stack([np.ones(len(y) - 1), y[:-1]])
    labels = ("const", *(f"{nm}[t-1]" for nm in names))
    return Design(y[1:], X, 1, 1, labels, names)


def _exploding(T: int = 121) -> np.ndarray:
    """(T, 2): x1.5 per period with 5% noise (19 orders of magnitude), and a calm series."""
    rng = np.random.default_rng(0)
    return np.column_stack([1.5 ** np.arange(T) * (1 + 0.05 * rng.standard_normal(T)),
                            10 + rng.standard_normal(T)])


def test_singular_precision_from_explosive_data_says_the_data_explode():
    """The failure point itself (data that bypassed load_series): it used to say
    'the regressors are collinear'."""
    design = _var1_design(_exploding(), ("sales", "calm"))
    prior = minnesota_prior(design, MinnesotaHyper(), np.ones(2), psi=np.ones(2))
    for fit in (lambda: flat_posterior(design), lambda: posterior(design, prior)):
        with pytest.raises(ExplosiveDataError, match="series 'sales' explodes") as info:
            fit()
        assert isinstance(info.value.__cause__, NotPositiveDefiniteError)
        assert "transforms={'sales': 'log'}" in str(info.value)


def test_exploding_and_duplicated_series_are_still_called_collinear():
    y = _exploding()
    y = np.column_stack([y[:, 0], 2 * y[:, 0], y[:, 1]])  # a scaled copy of 'sales'
    design = _var1_design(y, ("sales", "sales2", "calm"))
    with pytest.raises(NotPositiveDefiniteError, match="collinear"):
        flat_posterior(design)


def test_log_ml_keeps_not_positive_definite_for_the_tuning():
    """The hyperparameter search skips candidates on NotPositiveDefiniteError."""
    design = _var1_design(_exploding(), ("sales", "calm"))
    prior = minnesota_prior(design, MinnesotaHyper(), np.ones(2), psi=np.ones(2))
    with pytest.raises(NotPositiveDefiniteError, match="collinear"):
        log_marginal_likelihood(design, prior)


def test_collinear_after_scaling_ignores_sizes_not_directions():
    rng = np.random.default_rng(1)
    a, b = rng.standard_normal((2, 50))
    assert not collinear_after_scaling(np.column_stack([a, 1e20 * b]))
    assert collinear_after_scaling(np.column_stack([a, 1e20 * a]))
    assert collinear_after_scaling(np.column_stack([a, np.zeros(50)]))
    assert collinear_after_scaling(np.ones((2, 3)))  # fewer rows than columns


@pytest.mark.parametrize("dummies", [(None, None), (0.7, None), (None, 2.0), (0.5, 1.5)])
def test_fast_log_ml_equals_qr_route(known_var, rng, dummies):
    from priors.conjugate import Moments, log_marginal_likelihood_fast

    y = known_var.simulate(rng, 80) + 20.0
    design, prior = design_and_prior(y, lags=3, sum_coef=dummies[0], initial=dummies[1])
    exact = log_marginal_likelihood(design, prior)
    fast = log_marginal_likelihood_fast(Moments.of(design), prior)
    assert fast == pytest.approx(exact, rel=1e-9)


def test_cross_variable_tightness_other_than_one_is_refused(known_var, rng):
    # Kadiyala & Karlsson (1997); Sims & Zha (1998): Cov(vec B | Sigma) = Sigma (x) Omega0
    # makes the shrinkage profile common to all equations, so lambda_2 must be 1.
    from priors.errors import SpecificationError
    from priors.shrinkage import MinnesotaHyper, minnesota_prior

    design, _ = design_and_prior(known_var.simulate(rng, 40), lags=1)
    with pytest.raises(SpecificationError, match="cross-variable tightness 1"):
        minnesota_prior(design, MinnesotaHyper(cross=0.5), np.ones(design.n))
    prior = minnesota_prior(design, MinnesotaHyper(cross=1.0), np.ones(design.n))
    # the implied prior s.d. ratio of a cross lag to an own lag is sigma_i / sigma_j
    psi = np.diag(prior.S0)  # nu0 - n - 1 = 1, so S0 = diag(psi)
    own, cross = prior.omega[1 + 0] * psi[0], prior.omega[1 + 1] * psi[0]
    assert np.sqrt(cross / own) == pytest.approx(np.sqrt(psi[0] / psi[1]))


@pytest.mark.parametrize("d", [1, 2, 3, 7, 20])
@pytest.mark.parametrize("excess", [1e-9, 0.3, 1.0, 17.5, 600.0])
def test_log_multigamma_equals_scipy(d, excess):
    # Reference library: scipy.special.multigammaln
    from scipy.special import multigammaln

    a = 0.5 * (d - 1) + excess
    assert log_multigamma(a, d) == pytest.approx(multigammaln(a, d), rel=1e-13, abs=1e-12)


def test_log_multigamma_refuses_outside_its_domain():
    with pytest.raises(ValueError, match="a > \\(d - 1\\) / 2"):
        log_multigamma(1.0, 3)
