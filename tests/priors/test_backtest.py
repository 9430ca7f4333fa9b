"""Rolling-origin evaluation: outside checks on real and simulated data."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from priors.backtest import rolling_origin
from priors.errors import ConvergenceWarning, SpecificationError


def _macrodata() -> pd.DataFrame:
    import statsmodels.api as sm

    d = sm.datasets.macrodata.load_pandas().data
    index = pd.date_range("1959-01-01", periods=len(d), freq="QS")
    return pd.DataFrame({
        "realgdp": d["realgdp"].to_numpy(), "realcons": d["realcons"].to_numpy(),
        "realinv": d["realinv"].to_numpy(), "infl": d["infl"].to_numpy(),
        "unemp": d["unemp"].to_numpy(), "tbilrate": d["tbilrate"].to_numpy(),
        "m1": d["m1"].to_numpy()}, index=index)


@pytest.mark.slow
def test_tuned_minnesota_bvar_beats_ols_var_on_us_macro_data():
    """Open dataset: statsmodels' macrodata (US quarterly 1959-2009), seven variables:
    log real GDP, consumption, investment and M1, and inflation, unemployment and the
    T-bill rate in levels; scores in the data's units. VAR(4); 40 rolling origins,
    h = 1..8. Direction as reported by Litterman (1986), Banbura, Giannone & Reichlin
    (2010) and Giannone, Lenza & Primiceri (2015): the marginal-likelihood-tuned
    Minnesota BVAR (with sum-of-coefficients and initial-observation priors under GLP
    hyperpriors) has a lower RMSE than OLS. Measured with this seed: mean relative RMSE 0.91
    and relative CRPS 0.89 over series and horizons (BVAR / OLS; another seed gave 0.90
    and 0.88). With M1 as money growth (log differences) instead, the same comparison gave
    1.07: the dummy priors on a mix of levels and growth rates did not help output,
    consumption and investment; the evaluation issue should look into it."""
    data = _macrodata()
    transforms = {"realgdp": "log", "realcons": "log", "realinv": "log", "m1": "log"}
    params = {"lags": 4, "sum_coef": "auto", "initial": "auto", "hyperprior": True,
              "transforms": transforms}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = rolling_origin(data, params=params, origins=40, horizon=8, draws=500,
                                rng=np.random.default_rng(2026), benchmarks=("ols_var",))
    rmse = result.relative("ols_var", "rmse")["model"]
    crps = result.relative("ols_var", "crps")["model"]
    assert rmse.mean() < 0.95, rmse.groupby(level="series").mean()
    assert crps.mean() < 0.95
    assert (rmse.groupby(level="horizon").mean() < 1.0).all()


def test_calibrated_on_data_from_a_known_var(known_var):
    # Forecasts of a correctly specified model: 90% intervals cover about 90% of outcomes
    # and the model is not worse than the random walk. 60 origins x 3 series x 2 steps;
    # the binomial s.e. of a 90% rate over 360 outcomes is 0.016, and outcomes of one
    # origin are correlated, so the tolerance is 0.07 (about 4 s.e.).
    rng = np.random.default_rng(9)
    y = known_var.simulate(rng, 260)
    result = rolling_origin(y, params={"lags": 2}, origins=60, horizon=2, draws=400,
                            rng=rng, benchmarks=("ols_var", "random_walk"))
    table = result.scores()
    assert set(table["model"]) == {"model", "ols_var", "random_walk"}
    # coverage of the 90% intervals at every horizon, averaged over the 3 series (60
    # origins each: binomial s.d. of one series' rate ~0.04; tolerance 0.07 on the mean)
    by_h = table[table["model"] == "model"].groupby("horizon")["coverage"].mean()
    assert set(by_h.index) == {1, 2}
    assert (abs(by_h - 0.9) < 0.07).all(), by_h
    rel = result.relative("random_walk", "crps")["model"]
    assert rel.mean() < 1.0
    stat, p = result.dm_test("random_walk", horizon=1, series="y1")
    assert np.isfinite(stat) and 0 <= p <= 1
    # one-step PITs of a correctly specified model are uniform (Diebold, Gunther & Tay
    # 1998); one-step PITs are independent across origins, so a KS test applies
    # (alpha 1e-3, fixed seed)
    from scipy import stats

    assert stats.kstest(result.pit["model"][:, 0, :].ravel(), "uniform").pvalue > 1e-3
    # log scores per horizon (exact at step 1, mixtures at step 2): the prior's
    # shrinkage helps or ties versus OLS, and two steps ahead is harder than one
    assert result.log_score["model"].shape == (60, 2)
    logs = result.log_scores().set_index(["model", "horizon"])["log_score"]
    assert logs["model", 1] > logs["ols_var", 1] - 0.05
    assert logs["model", 2] > logs["ols_var", 2] - 0.05
    assert logs["model", 2] < logs["model", 1]
    tests = result.pit_tests()
    assert set(tests["horizon"]) == {1, 2} and set(tests["model"]) == {"model", "ols_var"}
    assert tests["p_value"].between(0, 1).all()
    # the other proper scores on the same origins: pinball loss averaged over the
    # quantile levels, the energy score of the standardised joint forecast (Gneiting &
    # Raftery 2007), and Diebold-Mariano tests with the HLN correction; the VAR beats
    # the random walk on data from a stationary VAR
    pin = table.groupby("model")["pinball"].mean()
    assert pin["model"] < pin["random_walk"]
    energy = result.energy_scores().set_index(["model", "horizon"])["energy"]
    assert energy["model", 1] < energy["random_walk", 1]
    dm = result.dm_tests()
    assert set(dm["benchmark"]) == {"ols_var", "random_walk"}
    assert dm["p_value"].between(0, 1).all()
    vs_rw = dm[(dm["benchmark"] == "random_walk") & (dm["horizon"] == 1)]
    assert (vs_rw["statistic"] < 0).all() and (vs_rw["p_value"] < 0.05).any()


def test_h_step_pits_of_a_correct_model_pass_the_hac_moment_test(known_var):
    # Knueppel (2015): h-step PITs of calibrated forecasts, tested with a long-run
    # covariance over h - 1 lags. Flat prior (no shrinkage bias), 80 origins, h = 1..3,
    # 3 series: 9 tests. Estimated parameters make PITs of neighbouring origins depend on
    # each other beyond MA(h-1), so the nominal level is not exact; measured smallest
    # p-values over the 9 tests for seeds 9, 10, 11: 0.027, 0.0007, 0.22. Asserted:
    # above 1e-4 (seed 11 here).
    rng = np.random.default_rng(11)
    y = known_var.simulate(rng, 300)
    result = rolling_origin(y, params={"lags": 2, "prior": "flat"}, origins=80, horizon=3,
                            draws=500, rng=rng, benchmarks=())
    tests = result.pit_tests()
    assert len(tests) == 9
    assert tests["p_value"].min() > 1e-4


def test_seasonal_naive_and_bad_settings():
    from pathlib import Path

    demo = pd.read_csv(Path(__file__).resolve().parents[2] / "examples" /
                       "bike_parts_demand.csv", index_col=0, parse_dates=True)
    result = rolling_origin(demo[["tyres", "chains"]], params={"lags": 1, "seasonal": True},
                            origins=6, horizon=3, draws=200, period=12,
                            benchmarks=("seasonal_naive",), rng=np.random.default_rng(0))
    table = result.scores()
    assert set(table["model"]) == {"model", "seasonal_naive"}
    assert (table.groupby("model")["count"].sum() > 0).all()
    assert np.isnan(result.actual[-1, 1:]).all()  # beyond the data
    with pytest.raises(SpecificationError, match="period"):
        rolling_origin(demo, origins=3, horizon=2, benchmarks=("seasonal_naive",),
                       rng=np.random.default_rng(0))


def test_parallel_origins_give_the_same_result(known_var):
    y = known_var.simulate(np.random.default_rng(5), 80)
    kwargs = {"params": {"lags": 1}, "origins": 4, "horizon": 2, "draws": 100}
    serial = rolling_origin(y, rng=np.random.default_rng(1), **kwargs)
    seen = []
    parallel = rolling_origin(y, rng=np.random.default_rng(1), workers=2,
                              progress=lambda done, total: seen.append((done, total)), **kwargs)
    pd.testing.assert_frame_equal(serial.scores(), parallel.scores())
    assert seen[-1] == (4, 4)


def test_rank_settings_prefers_the_true_lag_order():
    # Data from a VAR(2) with a strong second lag: VAR(2) must rank above VAR(1).
    from priors.backtest import rank_settings

    rng = np.random.default_rng(8)
    y = np.zeros((260, 2))
    for t in range(2, 260):
        y[t] = 0.2 * y[t - 1] - 0.6 * y[t - 2] + rng.standard_normal(2)
    table = rank_settings(y[60:], {"VAR(1)": {"lags": 1}, "VAR(2)": {"lags": 2}},
                          rng=np.random.default_rng(0), origins=40, horizon=2, draws=200)
    assert list(table["candidate"]) == ["VAR(2)", "VAR(1)"]
    assert table["relative_crps"].iloc[0] < table["relative_crps"].iloc[1]


def test_extra_benchmarks_are_scored_as_gaussian():
    # An outside forecaster returning the truth's mean and s.d. for white noise: its
    # CRPS equals the normal closed form averaged over outcomes.
    from priors.scores import crps_normal

    rng = np.random.default_rng(3)
    y = rng.standard_normal((60, 2))

    def oracle(train, horizon):
        return np.zeros((horizon, 2)), np.ones((horizon, 2))

    result = rolling_origin(y, params={"lags": 1}, origins=10, horizon=1, draws=50,
                            rng=rng, benchmarks=(), extra={"oracle": oracle})
    expected = crps_normal(0.0, 1.0, result.actual[:, 0, :]).mean(axis=0)
    got = result.scores().query("model == 'oracle'")["crps"].to_numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-12)
