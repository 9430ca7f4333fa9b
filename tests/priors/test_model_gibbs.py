"""FanfoldVAR(prior="independent"): fitting by Gibbs behind the same interfaces as the
conjugate engine (the sampler itself is checked against references in test_gibbs.py)."""

from __future__ import annotations

import numpy as np
import pytest

from priors.errors import SpecificationError
from priors.model import FanfoldVAR

from .helpers import two_lines

FAST = {"chains": 2, "burn": 50, "keep": 200}


@pytest.fixture(scope="module")
def fitted():
    frame = two_lines(120, 3)
    return frame, FanfoldVAR(prior="independent", lags=2, tightness=0.2, cross=0.5,
                             **FAST).fit(frame, rng=np.random.default_rng(0))


def test_fit_needs_an_rng_and_valid_settings():
    frame = two_lines(60, 1)
    with pytest.raises(SpecificationError, match="rng"):
        FanfoldVAR(prior="independent", lags=1, **FAST).fit(frame)
    with pytest.raises(SpecificationError, match="needs prior='independent'"):
        FanfoldVAR(cross=0.5, lags=1).fit(frame)
    with pytest.raises(SpecificationError, match="keep"):
        FanfoldVAR(prior="independent", keep=0).fit(frame, rng=np.random.default_rng(0))


def test_same_interfaces_as_the_conjugate_engine(fitted):
    frame, model = fitted
    assert model.sampler_.B.shape == (2, 200, 5, 2) and model.sampler_.B.dtype == np.float32
    assert model.log_ml_ is None and model.hyperparameters()["cross"] == 0.5
    fc = model.forecast(3, rng=np.random.default_rng(1), draws=300)
    assert fc.paths.shape == (300, 3, 2) and fc.dates[0] > frame.index[-1]
    table = model.coefficients(0.9)
    B = model.sampler_.flat()[0]
    np.testing.assert_allclose(table["mean"].to_numpy(),
                               B.mean(axis=0).T.ravel(), rtol=1e-12)
    np.testing.assert_allclose(model.sigma_mean().to_numpy(),
                               model.sampler_.flat()[1].mean(axis=0))
    report = model.convergence()
    assert report is not None and set(report.table["variable"]) == {"B", "Sigma"}
    assert len(report.table) == 5 * 2 + 3
    assert model.convergence() is report  # computed once
    sc = model.scenario(2, [model.condition("tyres", 1, value=250.0)],
                        rng=np.random.default_rng(2), draws=100)
    np.testing.assert_allclose(sc.forecast.paths[:, 0, 0], 250.0)
    irf = model.impulse_responses(3, rng=np.random.default_rng(3), draws=100)
    assert irf.draws.shape == (100, 4, 2, 2)
    assert np.isfinite(model.one_step_log_density(frame.iloc[-1].to_numpy()))


def test_cross_tightness_shrinks_other_series_lags_harder():
    # Minnesota intuition (Litterman 1986): a smaller cross tightness pulls the other
    # series' lag coefficients toward zero and narrows their posterior.
    frame = two_lines(80, 5)
    kw = {"prior": "independent", "lags": 1, "tightness": 0.2, **FAST}
    loose = FanfoldVAR(cross=1.0, **kw).fit(frame, rng=np.random.default_rng(0))
    tight = FanfoldVAR(cross=0.05, **kw).fit(frame, rng=np.random.default_rng(0))

    def cross_row(model):
        t = model.coefficients()
        return t[(t["equation"] == "inner_tubes") & (t["regressor"] == "tyres[t-1]")].iloc[0]

    assert abs(cross_row(tight)["mean"]) < abs(cross_row(loose)["mean"])
    assert cross_row(tight)["sd"] < cross_row(loose)["sd"]


def test_append_runs_the_chains_again_and_restore_keeps_the_draws(fitted):
    frame, model = fitted
    part = FanfoldVAR(**model.get_params()).fit(frame.iloc[:-3], rng=np.random.default_rng(0))
    with pytest.raises(SpecificationError, match="rng"):
        part.append(frame.iloc[-3:])
    grown = part.append(frame.iloc[-3:], rng=np.random.default_rng(0))
    assert grown.series_.nobs == model.series_.nobs
    np.testing.assert_allclose(grown.sampler_.B, model.sampler_.B, rtol=1e-4, atol=1e-5)
    back = FanfoldVAR.restore(model.resolved_params(), frame, lags=model.lags_, hyper=model.hyper_,
                              posterior=model.posterior_, draws=model.sampler_)
    np.testing.assert_array_equal(back.coefficients()["mean"], model.coefficients()["mean"])
    with pytest.raises(SpecificationError, match="stored Gibbs draws"):
        FanfoldVAR.restore(model.resolved_params(), frame, lags=model.lags_, hyper=model.hyper_,
                           posterior=model.posterior_)


def test_outlier_periods_by_date_get_their_own_scale():
    frame = two_lines(120, 7)
    frame.iloc[60:63] += np.array([[90.0, -120.0], [-70.0, 100.0], [80.0, 90.0]])  # shocks
    model = FanfoldVAR(prior="independent", lags=1, tightness=0.2, chains=2, burn=100,
                       keep=400, outliers=[(frame.index[60].date().isoformat(), 3),
                                           (frame.index[20], 2)])
    model.fit(frame, rng=np.random.default_rng(0))
    s = model.sampler_.scales.reshape(-1, 2)
    assert np.median(s[:, 0]) > 3 and np.median(s[:, 1]) < 2
    with pytest.raises(SpecificationError, match="not a date"):
        FanfoldVAR(prior="independent", lags=1, outliers=[("1990-01-01", 2)], **FAST).fit(
            frame, rng=np.random.default_rng(0))
    with pytest.raises(SpecificationError, match="start within the estimation sample"):
        FanfoldVAR(prior="independent", lags=1, outliers=[(frame.index[0], 3)], **FAST).fit(
            frame, rng=np.random.default_rng(0))
    with pytest.raises(SpecificationError, match="need prior='independent'"):
        FanfoldVAR(outliers=[(frame.index[5], 1)]).fit(frame)


def test_sampled_tightness_is_reported_with_its_posterior():
    frame = two_lines(100, 9)
    model = FanfoldVAR(prior="independent", lags=2, tightness=0.2, cross=0.5,
                       sample_hyper=True, chains=2, burn=100, keep=300)
    model.fit(frame, rng=np.random.default_rng(0))
    h = model.sampler_.hyper.reshape(-1, 2)
    assert h.shape == (600, 2) and np.all(h > 0)
    assert np.std(h[:, 0]) > 0 and np.std(h[:, 1]) > 0  # the chains move
    hp = model.hyperparameters()
    assert hp["tightness"] == pytest.approx(np.median(h[:, 0]), rel=1e-6)
    assert hp["cross"] == pytest.approx(np.median(h[:, 1]), rel=1e-6)
    with pytest.raises(SpecificationError, match="sample_hyper needs"):
        FanfoldVAR(sample_hyper=True).fit(frame)



def test_an_ongoing_outlier_period_widens_the_forecast_it_covers():
    # A disruption in the last two months that is known to last four: its estimated
    # scale carries into the first two forecast months, and only those.
    frame = two_lines(120, 8)
    frame.iloc[-2:] += np.array([[150.0, -160.0], [-140.0, 170.0]])
    kw = {"prior": "independent", "lags": 1, "tightness": 0.2, "chains": 2, "burn": 100,
          "keep": 400}
    calm = FanfoldVAR(**kw, outliers=[(frame.index[-2], 2)])
    calm.fit(frame, rng=np.random.default_rng(0))
    ongoing = FanfoldVAR(**kw, outliers=[(frame.index[-2], 4)])
    ongoing.fit(frame, rng=np.random.default_rng(0))
    assert ongoing._outlier_future() == [(0, [1, 2])]
    a = calm.forecast(4, rng=np.random.default_rng(1), draws=2000).paths
    b = ongoing.forecast(4, rng=np.random.default_rng(1), draws=2000).paths
    ratio = b[:, 0].std(axis=0) / a[:, 0].std(axis=0)
    assert np.all(ratio > 1.5)  # scales of about 3-6 were estimated for those months
    with pytest.raises(SpecificationError, match="not supported"):
        ongoing.scenario(2, [], rng=np.random.default_rng(0), draws=10)


def test_diagnostics_cover_sampled_hyperparameters_and_outlier_scales():
    frame = two_lines(100, 12)
    model = FanfoldVAR(prior="independent", lags=1, tightness=0.2, sample_hyper=True,
                       outliers=[(frame.index[50], 2)], chains=2, burn=50, keep=100)
    model.fit(frame, rng=np.random.default_rng(0))
    table = model.convergence().table
    assert {"hyper", "scale"} <= set(table["variable"])
    assert set(table[table["variable"] == "hyper"]["element"]) == {"tightness", "cross"}
