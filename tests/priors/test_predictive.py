"""Predictive paths: the fast sampler, the exact one-step predictive, coverage."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from priors.conjugate import posterior
from priors.data import Deterministics, future_exogenous_rows, load_series
from priors.model import FanfoldVAR
from priors.predictive import (
    companion_spectral_radius,
    simulate_paths,
    simulate_paths_from_draws,
)
from priors.sampling import sample_posterior

from .helpers import design_and_prior

ALPHA = 1e-3  # family-wise false-alarm rate of each statistical check


def _setup(known_var, rng, T=60, lags=1, n=2):
    y = known_var.simulate(rng, T)[:, :n]
    design, prior = design_and_prior(y, lags=lags)
    post = posterior(design, prior)
    series = load_series(y)
    return design, post, series


@pytest.mark.parametrize(("lags", "h", "method"), [
    (1, 8, "projection"), (3, 8, "projection"), (6, 6, "projection"), (3, 8, "explicit"),
])
def test_samplers_match_explicit_parameter_draws(known_var, rng, lags, h, method):
    # The projection trick (draw u_h = Z'R^-T x_h + z_h from the Cholesky factor of
    # their Gram matrix) must give the same joint distribution as explicit (B, Sigma)
    # draws. With lags=1, h = 8 > k = 3 also covers the steps where the projection
    # vectors become linearly dependent; lags=3 covers steps that mix observed and
    # simulated lags; lags=6, h=6 has many regressors per step. "explicit" applies M_s
    # per step instead of forming B_s, which must not change the distribution either.
    design, post, series = _setup(known_var, rng, lags=lags)
    S = 40_000
    exog = future_exogenous_rows(series, Deterministics(), h)
    history = series.values[-lags:]
    fast = simulate_paths(np.random.default_rng(1), post, history, exog, S, method=method)
    draws = sample_posterior(np.random.default_rng(2), post, S)
    slow = simulate_paths_from_draws(np.random.default_rng(3), draws, history, exog)
    se = np.sqrt(fast.var(0) / S + slow.var(0) / S)
    z = (fast.mean(0) - slow.mean(0)) / se
    assert np.abs(z).max() < stats.norm.ppf(1 - ALPHA / (2 * z.size))
    np.testing.assert_allclose(fast.var(0), slow.var(0), rtol=0.06)
    # dependence across steps and series: correlation of the flattened paths
    cf = np.corrcoef(fast.reshape(S, -1), rowvar=False)
    cs = np.corrcoef(slow.reshape(S, -1), rowvar=False)
    assert np.abs(cf - cs).max() < 0.04  # about 4 s.e. of a correlation at 40k draws


def test_one_step_predictive_is_multivariate_t(known_var, rng):
    # Exact one-step predictive (methods sec. 7; Zellner 1971):
    # y_T+1 ~ t_{nu-n+1}(B_bar'x, (1 + x'P^-1 x) S / (nu - n + 1)); scipy.stats oracle.
    design, post, series = _setup(known_var, rng, lags=2)
    exog = future_exogenous_rows(series, Deterministics(), 1)
    history = series.values[-2:]
    paths = simulate_paths(np.random.default_rng(4), post, history, exog, 30_000,
                           method="projection")[:, 0]
    x = np.concatenate([exog[0], history[::-1].ravel()])
    v = np.linalg.solve(post.R.T, x)
    dof = post.df - post.n + 1
    scale = (1.0 + v @ v) * post.S / dof
    for i in range(post.n):
        ref = stats.t(df=dof, loc=post.B[:, i] @ x, scale=np.sqrt(scale[i, i]))
        assert stats.kstest(paths[:, i], ref.cdf).pvalue > ALPHA / post.n


@pytest.mark.parametrize("method", ["projection", "explicit", "auto"])
def test_same_seed_same_forecast_bit_for_bit(known_var, rng, method):
    design, post, series = _setup(known_var, rng)
    exog = future_exogenous_rows(series, Deterministics(), 5)
    a = simulate_paths(np.random.default_rng(9), post, series.values[-1:], exog, 100,
                       method=method)
    b = simulate_paths(np.random.default_rng(9), post, series.values[-1:], exog, 100,
                       method=method)
    assert np.array_equal(a, b)


def test_explicit_method_matches_closed_form_one_step_mean(known_var, rng):
    # E[y_T+1 | Y] = B_bar'x_T+1 (methods sec. 7); z-test at alpha 1e-3 per series.
    design, post, series = _setup(known_var, rng, lags=2)
    exog = future_exogenous_rows(series, Deterministics(), 1)
    history = series.values[-2:]
    paths = simulate_paths(np.random.default_rng(6), post, history, exog, 20_000,
                           method="explicit")[:, 0]
    x = np.concatenate([exog[0], history[::-1].ravel()])
    z = (paths.mean(0) - post.B.T @ x) / (paths.std(0) / np.sqrt(len(paths)))
    assert np.all(np.abs(z) < stats.norm.ppf(1 - ALPHA / (2 * post.n)))


def test_spectral_radius_matches_statsmodels_roots():
    # Reference library: statsmodels' VARResults.roots are the inverse companion
    # eigenvalues, so the spectral radius is 1 / min |root|.
    import statsmodels.api as sm
    from statsmodels.tsa.api import VAR

    data = sm.datasets.macrodata.load_pandas().data
    y = np.diff(np.log(data[["realgdp", "realcons", "realinv"]].to_numpy()), axis=0)
    ref = VAR(y).fit(3)
    radius = companion_spectral_radius(ref.params, 1, 3)
    assert radius == pytest.approx(1.0 / np.abs(ref.roots).min(), rel=1e-10)


def test_reject_explosive_keeps_only_stable_draws():
    rng = np.random.default_rng(5)
    y = np.cumsum(rng.standard_normal((40, 2)), axis=0)  # random walks: radius near 1
    model = FanfoldVAR(lags=1, tightness=0.5).fit(y)
    fc = model.forecast(6, rng=np.random.default_rng(1), draws=500, reject_explosive=True)
    assert fc.paths.shape == (500, 6, 2)
    assert fc.rejected_share is not None and 0.0 < fc.rejected_share < 1.0
    plain = model.forecast(6, rng=np.random.default_rng(1), draws=500)
    assert plain.rejected_share is None
    radius = model.spectral_radius(2000, rng=np.random.default_rng(2))
    # the reported share matches the posterior probability of an explosive draw
    assert fc.rejected_share == pytest.approx(np.mean(radius >= 1.0), abs=0.05)


def test_interval_coverage_near_nominal_on_known_var(known_var):
    # 200 replications of a known stationary VAR(2), T = 150, horizons 1..4.
    # Tolerance: hits pool over 200 x 3 series, so the binomial s.e. of an 80% rate is
    # about 0.016 and of a 95% rate about 0.009; we allow 3.5 s.e. plus 0.01 for the
    # shrinkage prior (Bayesian intervals are not exact frequentist intervals).
    rng = np.random.default_rng(77)
    reps, h, T = 200, 4, 150
    hits = {80: np.zeros((reps, h, 3)), 95: np.zeros((reps, h, 3))}
    for r in range(reps):
        y = known_var.simulate(rng, T + h)
        model = FanfoldVAR(lags=2).fit(y[:T])
        fc = model.forecast(h, rng=rng, draws=400)
        for cov, band in fc.bands((80, 95)).items():
            hits[int(cov)][r] = (band[0] <= y[T:]) & (y[T:] <= band[1])
    for cov, se in ((80, 0.016), (95, 0.009)):
        rate = hits[cov].mean(axis=(0, 2))  # per horizon
        assert np.all(np.abs(rate - cov / 100) < 3.5 * se + 0.01), (cov, rate)
