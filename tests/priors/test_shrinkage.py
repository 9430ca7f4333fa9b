"""Prior scales: each series' own autoregression (priors.shrinkage)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from priors.data import Deterministics, build_design, load_series
from priors.errors import ConstantSeriesError
from priors.shrinkage import ar_residual_variances

sm = pytest.importorskip("statsmodels.api")


def _macro_design(lags, det):
    # Open dataset: statsmodels' US macrodata, quarterly growth of real GDP,
    # consumption and investment (percent)
    data = sm.datasets.macrodata.load_pandas().data
    y = 100 * np.diff(np.log(data[["realgdp", "realcons", "realinv"]].to_numpy()), axis=0)
    return build_design(load_series(y, period=4), lags, det)


def _ols_variance(design, i):
    # Reference library: statsmodels OLS of series i on the deterministic terms and its
    # own lags; residual variance = SSR / residual degrees of freedom
    m, n = design.n_det, design.n
    Z = design.X[:, np.r_[0:m, m + i + n * np.arange(design.lags)]]
    fit = sm.OLS(design.Y[:, i], Z).fit()
    return fit.ssr / (design.nobs - Z.shape[1])


@pytest.mark.parametrize("lags", [1, 4, 8])
@pytest.mark.parametrize("det", [Deterministics(), Deterministics(trend=True, seasonal=True),
                                 Deterministics(constant=False)])
def test_own_ar_variances_equal_statsmodels_ols(lags, det):
    design = _macro_design(lags, det)
    expected = [_ols_variance(design, i) for i in range(design.n)]
    np.testing.assert_allclose(ar_residual_variances(design), expected, rtol=1e-10)


def test_rank_deficient_regressors_use_least_squares():
    # A constant column entered twice: minimum-norm least squares gives the same
    # residuals as with one copy; the degrees of freedom count every column.
    design = _macro_design(2, Deterministics())
    X = np.column_stack([design.X[:, :1], design.X])
    twice = dataclasses.replace(design, X=X, n_det=2, labels=("const2", *design.labels))
    once = ar_residual_variances(design)
    T, c = design.nobs, 1 + design.lags
    np.testing.assert_allclose(ar_residual_variances(twice), once * (T - c) / (T - c - 1),
                               rtol=1e-9)


def test_series_fitted_exactly_by_its_own_lags_is_refused():
    t = np.arange(60, dtype=np.float64)
    y = np.column_stack([0.9 ** t + 5.0, np.random.default_rng(3).standard_normal(60)])
    design = build_design(load_series(y), 2, Deterministics())
    with pytest.raises(ConstantSeriesError, match="fitted exactly by its own lags"):
        ar_residual_variances(design)


def test_prior_mean_on_a_seasonal_lag_and_its_sum_of_coefficients_row():
    # A (L, n) prior mean puts own-lag means on lags 1..L: here a seasonal random walk
    # (lag 4 of quarterly data) for the first series and a random walk for the second.
    # The sum-of-coefficients prior (Doan, Litterman & Sims 1984) applies to both, since
    # their own-lag means sum to one.
    from priors.shrinkage import MinnesotaHyper, minnesota_prior, own_lag_means

    y = np.random.default_rng(0).standard_normal((60, 2)).cumsum(axis=0) + 50.0
    design = build_design(load_series(y), 5, Deterministics())
    pm = np.zeros((4, 2))
    pm[3, 0] = 1.0
    pm[0, 1] = 1.0
    means = own_lag_means(pm, 2, 5)
    assert means.shape == (5, 2) and means[3, 0] == 1.0 and means[4].sum() == 0.0
    prior = minnesota_prior(design, MinnesotaHyper(sum_coef=1.0), pm)
    m = design.n_det
    assert prior.B0[m + 3 * 2 + 0, 0] == 1.0 and prior.B0[m + 0 * 2 + 1, 1] == 1.0
    assert prior.B0.sum() == 2.0
    assert prior.Yd.shape[0] == 2  # one sum-of-coefficients row per unit-root series
    with pytest.raises(Exception, match="lags"):
        own_lag_means(np.ones((6, 2)), 2, 5)
