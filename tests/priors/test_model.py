"""The FanfoldVAR facade: demo-data sanity check, flat limit, reporting, ArviZ export."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from priors.errors import NotFittedError, SpecificationError
from priors.model import FanfoldVAR

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"


def _demo():
    path = EXAMPLES / "make_bike_parts_demand.py"
    spec = importlib.util.spec_from_file_location("make_demo", path)
    module = importlib.util.module_from_spec(spec)
    assert spec.loader is not None
    spec.loader.exec_module(module)
    frame = pd.read_csv(EXAMPLES / "bike_parts_demand.csv", index_col=0, parse_dates=True)
    return module, frame


def test_demo_csv_is_what_the_generator_makes():
    module, frame = _demo()
    regenerated = module.simulate(module.DEFAULT_SEED if hasattr(module, "DEFAULT_SEED")
                                  else 20260101)
    np.testing.assert_array_equal(regenerated.to_numpy(), frame.to_numpy())


def test_demo_cross_effects_recovered_with_right_signs():
    # The demo data come from a known VAR (examples/make_bike_parts_demand.py); the
    # default model with seasonal dummies must recover each known lag-1 cross-effect's
    # sign, with a 90% credible interval that excludes zero.
    module, frame = _demo()
    model = FanfoldVAR(seasonal=True).fit(frame)
    table = model.coefficients(level=0.9).set_index(["equation", "regressor"])
    known = module.known_cross_effects()
    assert known
    for (src, dst), sign in known.items():
        row = table.loc[(dst, f"{src}[t-1]")]
        assert np.sign(row["mean"]) == sign
        assert (row["lower"] > 0) if sign > 0 else (row["upper"] < 0)


def test_flat_model_coefficients_equal_statsmodels_ols():
    # Reference library: statsmodels VAR (OLS) on its macrodata (open dataset).
    import statsmodels.api as sm
    from statsmodels.tsa.api import VAR

    data = sm.datasets.macrodata.load_pandas().data
    y = np.diff(np.log(data[["realgdp", "realcons", "realinv"]].to_numpy()), axis=0)
    model = FanfoldVAR(lags=3, prior="flat").fit(y)
    ref = VAR(y).fit(3)
    np.testing.assert_allclose(model.posterior_.B, ref.params, rtol=1e-8, atol=1e-12)
    assert model.log_ml_ is None
    assert model.hyperparameters()["tightness"] is None


def test_flat_auto_lags_uses_schwarz_criterion_like_statsmodels():
    # statsmodels' select_order with the same maximum: our common-sample BIC must agree.
    import statsmodels.api as sm
    from statsmodels.tsa.api import VAR

    data = sm.datasets.macrodata.load_pandas().data
    y = np.diff(np.log(data[["realgdp", "realcons", "realinv"]].to_numpy()), axis=0)
    model = FanfoldVAR(lags="auto", max_lags=6, prior="flat").fit(y)
    assert model.lags_ == VAR(y).select_order(6).bic


def test_forecast_on_dates_and_in_user_units():
    _, frame = _demo()
    model = FanfoldVAR(lags=2, transforms={"tyres": "log", "chains": "logdiff"}).fit(frame)
    fc = model.forecast(6, rng=np.random.default_rng(0), draws=300)
    assert list(fc.dates) == list(pd.date_range("2026-01-01", periods=6, freq="MS"))
    assert np.all(fc.paths[:, :, 0] > 0) and np.all(fc.paths[:, :, 3] > 0)
    # levels near the last observations, not near log-levels or growth rates
    assert abs(fc.median()[0, 0] / frame["tyres"].iloc[-1] - 1) < 0.5
    assert abs(fc.median()[0, 3] / frame["chains"].iloc[-1] - 1) < 0.5


def test_exogenous_regressor_needs_future_values():
    rng = np.random.default_rng(1)
    promo = (rng.random(80) < 0.2).astype(float)
    y = np.column_stack([10 + 3 * promo + rng.standard_normal(80), rng.standard_normal(80)])
    model = FanfoldVAR(lags=1).fit(y, exog=pd.DataFrame({"promo": promo}))
    assert "promo" in model.design_.labels
    coef = model.coefficients().set_index(["equation", "regressor"])
    assert coef.loc[("y1", "promo"), "lower"] > 2.0
    fc = model.forecast(3, rng=rng, draws=200, exog_future=np.array([[1.0], [0.0], [1.0]]))
    assert fc.mean()[0, 0] > fc.mean()[1, 0]
    from priors.errors import ExogenousError

    with pytest.raises(ExogenousError, match="future values"):
        model.forecast(3, rng=rng)


def test_unfitted_model_and_bad_settings():
    with pytest.raises(NotFittedError, match="fit"):
        FanfoldVAR().forecast(3, rng=np.random.default_rng(0))
    y = np.random.default_rng(0).standard_normal((50, 2))
    with pytest.raises(SpecificationError, match="prior"):
        FanfoldVAR(prior="wishful").fit(y)
    with pytest.raises(SpecificationError, match="lags"):
        FanfoldVAR(lags=0).fit(y)
    with pytest.raises(SpecificationError, match="horizon"):
        FanfoldVAR(lags=1).fit(y).forecast(0, rng=np.random.default_rng(0))


def test_reported_hyperparameters_and_lag_search(known_var, rng):
    y = np.cumsum(known_var.simulate(rng, 120), axis=0) + 100.0  # random walks
    model = FanfoldVAR(max_lags=4, sum_coef=0.5, initial=None).fit(y)
    hp = model.hyperparameters()
    assert hp["lags"] == model.lags_ and 1 <= hp["lags"] <= 4
    assert hp["tightness"] > 0 and hp["sum_coef"] == 0.5 and hp["initial"] is None
    assert len(model.lag_search_) == 4
    assert np.isfinite(model.log_ml_)


def test_arviz_export_has_named_dimensions(known_var, rng):
    import arviz

    from priors.diagnostics import arviz_major_version, to_arviz

    model = FanfoldVAR(lags=1).fit(known_var.simulate(rng, 80))
    draws = model.sample(400, rng=rng)
    data = to_arviz(draws, regressors=model.design_.labels, series=model.design_.names,
                    chains=4)
    post = data["posterior"] if arviz_major_version() >= 1 else data.posterior
    assert dict(post["B"].sizes) == {"chain": 4, "draw": 100, "regressor": 4, "equation": 3}
    rhat = arviz.rhat(data)
    assert float(rhat["B"].max()) < 1.05  # i.i.d. draws split into chains


def test_restore_from_stored_parts_forecasts_like_the_original():
    _, frame = _demo()
    model = FanfoldVAR(seasonal=True, transforms={"tyres": "log"}, max_lags=3).fit(frame)
    again = FanfoldVAR.restore(model.resolved_params(), frame, lags=model.lags_,
                               hyper=model.hyper_, posterior=model.posterior_)
    a = model.forecast(4, rng=np.random.default_rng(3), draws=200)
    b = again.forecast(4, rng=np.random.default_rng(3), draws=200)
    assert np.array_equal(a.paths, b.paths)
    pd.testing.assert_frame_equal(model.coefficients(), again.coefficients())
    with pytest.raises(SpecificationError, match="does not match"):
        FanfoldVAR.restore(model.resolved_params(), frame, lags=model.lags_ + 1,
                           hyper=model.hyper_, posterior=model.posterior_)


@pytest.mark.parametrize("settings", [
    {"lags": 2, "seasonal": True},
    {"lags": 1, "sum_coef": 0.5, "initial": 2.0, "transforms": {"chains": "logdiff"}},
    {"lags": 2, "prior": "flat"},
])
def test_append_updates_the_posterior_exactly_like_a_refit(settings):
    # Recursive least squares (Kadiyala & Karlsson 1997): adding rows to the NIW posterior
    # equals the posterior of all rows under the same prior, log marginal likelihood too.
    from priors.conjugate import flat_posterior, posterior

    _, frame = _demo()
    model = FanfoldVAR(**settings).fit(frame.iloc[:100])
    grown = model.append(frame.iloc[100:])
    design = grown.design_
    if model.prior_ is None:
        full = flat_posterior(design)
    else:
        full = posterior(design, model.prior_)  # the same prior, all the data
    np.testing.assert_allclose(grown.posterior_.B, full.B, rtol=1e-9, atol=1e-9)
    P_full = full.R.T @ full.R
    np.testing.assert_allclose(grown.posterior_.R.T @ grown.posterior_.R, P_full, rtol=1e-9,
                               atol=1e-12 * np.abs(P_full).max())
    np.testing.assert_allclose(grown.posterior_.S, full.S, rtol=1e-9)
    assert grown.posterior_.df == full.df
    if full.log_ml is None:
        assert grown.log_ml_ is None
    else:
        assert grown.log_ml_ == pytest.approx(full.log_ml, rel=1e-10)
    assert grown.series_.nobs == model.series_.nobs + 20
    fc = grown.forecast(2, rng=np.random.default_rng(0), draws=50)
    assert str(fc.dates[0].date()) == "2026-01-01"


def test_append_refuses_rows_that_do_not_continue_the_data():
    from priors.errors import TimeIndexError

    _, frame = _demo()
    model = FanfoldVAR(lags=1).fit(frame.iloc[:100])
    with pytest.raises(TimeIndexError):
        model.append(frame.iloc[101:])  # a gap of one month
    with pytest.raises(TimeIndexError):
        model.append(frame.iloc[90:100])  # dates already there


def test_rows_without_dates_continue_the_models_calendar():
    """New rows given as an array (or a frame without dates) take the periods right after
    the model's data; the model's dates are never replaced by row numbers."""
    _, frame = _demo()
    model = FanfoldVAR(lags=2, seasonal=True).fit(frame.iloc[:100])
    dated = model.append(frame.iloc[100:103])
    for plain in (frame.iloc[100:103].to_numpy(), frame.iloc[100:103].reset_index(drop=True)):
        grown = model.append(plain)
        assert grown.series_.calendar.index.equals(dated.series_.calendar.index)
        assert grown.series_.calendar.kind == "monthly"
        np.testing.assert_array_equal(grown.posterior_.B, dated.posterior_.B)
    one = model.append(frame.iloc[100].to_numpy())  # a single period, as a 1-D row
    assert one.series_.calendar.index[-1] == frame.index[100]
    plain_model = FanfoldVAR(lags=1).fit(frame.iloc[:100].to_numpy())
    from priors.errors import TimeIndexError

    with pytest.raises(TimeIndexError, match="no dates"):
        plain_model.append(frame.iloc[100:102])


def test_one_step_log_density_equals_the_marginal_likelihood_increment(known_var, rng):
    # log p(y_T+1 | Y) = log p(Y, y_T+1) - log p(Y) under the same prior (the sequential
    # form of the marginal likelihood; methods brief sec. 3(b))
    y = known_var.simulate(rng, 81)
    model = FanfoldVAR(lags=2, tightness=0.3).fit(y[:80])
    grown = model.append(y[80:])
    assert model.one_step_log_density(y[80]) == pytest.approx(
        grown.log_ml_ - model.log_ml_, rel=1e-9)
