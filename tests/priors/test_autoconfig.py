"""The automatic configuration (priors/autoconfig.py): log-Jacobians, seasonal and
transform choices on open data, explicit settings overriding, and count-aware output."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from priors import FanfoldVAR
from priors.autoconfig import log_jacobian, log_type_transform
from priors.conjugate import posterior
from priors.data import Deterministics, build_design, count_columns, load_series
from priors.shrinkage import MinnesotaHyper, minnesota_prior
from tests.corpus import e1_levels, macro_levels, visitor_nights


def test_log_jacobian_turns_a_normal_density_of_logs_into_the_lognormal_density():
    # scipy.stats as the oracle: lognorm.logpdf(y) = norm.logpdf(log y) - log y
    y = np.array([[0.5, 3.0], [1.7, 2.2], [4.0, 0.9]])
    mu, s = 0.3, 0.8
    lognormal = stats.lognorm.logpdf(y, s, scale=np.exp(mu)).sum()
    normal_of_logs = stats.norm.logpdf(np.log(y), mu, s).sum()
    assert normal_of_logs + log_jacobian(y, ("log", "log")) == pytest.approx(lognormal,
                                                                             rel=1e-12)
    # log1p: d log(1 + y) / dy = 1 / (1 + y)
    assert log_jacobian(y, ("log1p", "none")) == pytest.approx(-np.log1p(y[:, 0]).sum())


def test_log_type_transform_by_the_values():
    assert log_type_transform(np.array([1.0, 2.5, 3.0])) == "log"
    assert log_type_transform(np.array([0.0, 2.0, 3.0])) == "log1p"
    assert log_type_transform(np.array([-1.0, 2.0, 3.0])) == "none"


def test_count_columns():
    levels = np.array([[0.0, 1.5, 3.0, -1.0], [2.0, 2.0, np.nan, 4.0]])
    assert count_columns(levels).tolist() == [True, False, True, False]


def test_scores_compare_levels_and_logs_on_the_same_sample():
    # The score of a transform is the log density of the data in the user's units:
    # log p(log y) - sum log y on the rows of the common sample. Recompute it by hand.
    cs = e1_levels()
    from priors.autoconfig import AutoRequest, _Scorer

    scorer = _Scorer(cs.data, AutoRequest(), exog=None, names=None, period=None)
    scorer.start = 2
    hyper = MinnesotaHyper(tightness=0.3)
    score, _ = scorer.score(("log",) * 3, False, 2, hyper, ())
    series = load_series(cs.data, transforms="log")
    design = build_design(series, 2, Deterministics(), start=2)
    from priors.transforms import default_prior_mean

    lml = posterior(design, minnesota_prior(design, hyper, default_prior_mean(series.transforms)))
    assert score == pytest.approx(lml.log_ml - np.log(cs.data.to_numpy()[2:]).sum(), rel=1e-12)


def test_seasonal_dummies_chosen_for_seasonal_visitor_nights():
    # fpp2::visnights: quarterly visitor nights with a strong seasonal pattern
    data = visitor_nights().data
    model = FanfoldVAR().fit(data)
    config = model.configuration_
    assert config.seasonal
    assert "seasonal" in config.chosen
    assert model.deterministics_.seasonal
    assert model.hyper_.season_scale is not None
    assert any("quarter=" in label for label in model.design_.labels)


@pytest.mark.parametrize("loader", [e1_levels, macro_levels])
def test_no_seasonal_dummies_for_seasonally_adjusted_data(loader):
    # Lutkepohl's E1 and statsmodels' macrodata are seasonally adjusted
    model = FanfoldVAR().fit(loader().data)
    assert not model.configuration_.seasonal
    assert not any(lab.startswith("quarter=") for lab in model.design_.labels)


def test_explicit_settings_override_the_automatic_choice():
    data = visitor_nights().data
    model = FanfoldVAR(seasonal=False, transforms=None, lags=2, sum_coef=None,
                       initial=None).fit(data)
    assert model.configuration_.chosen == ()
    assert not model.deterministics_.seasonal
    assert model.series_.transforms == ("none",) * data.shape[1]
    assert model.lags_ == 2
    assert model.hyper_.sum_coef is None and model.hyper_.initial is None


def test_restore_from_resolved_params_forecasts_the_same(rng):
    data = visitor_nights().data
    model = FanfoldVAR().fit(data)
    params = model.resolved_params()
    assert params["seasonal"] is True
    assert params["transforms"] == dict(zip(data.columns, model.series_.transforms,
                                            strict=True))
    again = FanfoldVAR.restore(params, data, lags=model.lags_, hyper=model.hyper_,
                               posterior=model.posterior_,
                               configuration=model.configuration_.to_dict(data.columns))
    a = model.forecast(4, rng=np.random.default_rng(5), draws=200).paths
    b = again.forecast(4, rng=np.random.default_rng(5), draws=200).paths
    np.testing.assert_array_equal(a, b)
    assert again.configuration_.reasons == model.configuration_.reasons


def test_restore_refuses_auto_structure():
    data = visitor_nights().data
    model = FanfoldVAR().fit(data)
    from priors.errors import SpecificationError

    with pytest.raises(SpecificationError, match="resolved_params"):
        FanfoldVAR.restore(model.get_params(), data, lags=model.lags_, hyper=model.hyper_,
                           posterior=model.posterior_)


def _slow_mover(rng: np.random.Generator) -> pd.DataFrame:
    # a slow-moving item: Poisson demand with mean 2 a week, and a busier one
    index = pd.date_range("2023-01-02", periods=80, freq="W-MON")
    return pd.DataFrame({"valves": rng.poisson(2.0, 80), "pumps": rng.poisson(12.0, 80)},
                        index=index).astype(float)


def test_count_series_never_forecast_below_zero():
    data = _slow_mover(np.random.default_rng(11))
    model = FanfoldVAR(transforms=None).fit(data)  # levels: the model has mass below 0
    assert model.counts_ == (True, True)
    fc = model.forecast(8, rng=np.random.default_rng(2), draws=2000)
    assert fc.paths.min() >= 0.0
    assert np.all(fc.quantiles([0.05]) >= 0.0)
    # the same model without count awareness puts the 5% quantile below zero
    plain = FanfoldVAR(transforms=None, counts=False).fit(data)
    raw = plain.forecast(8, rng=np.random.default_rng(2), draws=2000)
    assert raw.quantiles([0.05])[0, :, 0].min() < 0.0


def test_counts_auto_leaves_non_integer_series_alone():
    data = _slow_mover(np.random.default_rng(11))
    data["valves"] += 0.5
    assert FanfoldVAR(transforms=None).fit(data).counts_ == (False, True)


def test_explosive_levels_are_modelled_in_logs():
    # a series growing 12% a period for 250 periods (a 1e12-fold rise) breaks a levels
    # model; left to choose, the configuration takes logs and says why
    rng = np.random.default_rng(4)
    t = np.arange(250)
    grow = np.exp(0.12 * t + np.cumsum(rng.normal(0, 0.02, 250)))
    data = pd.DataFrame({"a": 50.0 * grow, "b": 20.0 * grow * np.exp(rng.normal(0, 0.05, 250))},
                        index=pd.date_range("1990-01-01", periods=250, freq="MS"))
    model = FanfoldVAR(lags=2, seasonal=False).fit(data)
    assert model.series_.transforms == ("log", "log")
    assert any("orders of magnitude" in r for r in model.configuration_.reasons)
    from priors.errors import ExplosiveDataError

    with pytest.raises(ExplosiveDataError):
        FanfoldVAR(lags=2, seasonal=False, transforms=None).fit(data)
