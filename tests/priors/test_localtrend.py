"""The local damped-trend model (priors/localtrend.py) against statsmodels' ETSModel (the
same ETS(A,Ad,A) / ETS(A,Ad,N) recursions of Hyndman, Koehler, Ord & Snyder 2008, used
here as the oracle only) and the published forecast-variance formula (their Table 6.1,
class 1), on open data that statsmodels ships (the Mauna Loa CO2 series, seasonal; US
real GDP from macrodata, trending)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.tsa.exponential_smoothing.ets import ETSModel

from priors.errors import SpecificationError
from priors.localtrend import (
    PHI_BOUNDS,
    LocalTrendFit,
    fit_local_trend,
    forecast_moments,
    initial_states,
    one_step_errors,
    simulate_local_trend,
)


@pytest.fixture(scope="module")
def co2() -> np.ndarray:
    # statsmodels.datasets.co2 (Mauna Loa, weekly from 1958), monthly means, first 10 years
    weekly = sm.datasets.co2.load_pandas().data["co2"]
    return weekly.resample("MS").mean().ffill().to_numpy()[:120]


@pytest.fixture(scope="module")
def gdp() -> np.ndarray:
    # statsmodels.datasets.macrodata: US real GDP, quarterly 1959-2009, in logs (x100)
    return 100 * np.log(sm.datasets.macrodata.load_pandas().data["realgdp"].to_numpy())


def _ets_model(y: np.ndarray, period: int) -> ETSModel:
    """statsmodels' ETS(A,Ad,A) (ETS(A,Ad,N) for period 0) started from our states."""
    level, trend, season = initial_states(y, period)
    seasonal = ({"seasonal": "add", "seasonal_periods": period, "initial_seasonal": season}
                if period else {})
    return ETSModel(y, error="add", trend="add", damped_trend=True,
                    initialization_method="known", initial_level=level, initial_trend=trend,
                    **seasonal)


def _oracle(y: np.ndarray, period: int, params: tuple[float, ...]):
    model = _ets_model(y, period)
    return model.smooth(list(params) if period else [params[0], params[1], params[3]])


CASES = [("co2", 12, (0.4, 0.05, 0.2, 0.9)), ("co2", 12, (0.9, 0.3, 0.05, 0.98)),
         ("gdp", 0, (0.7, 0.2, 0.0, 0.85)), ("gdp", 4, (0.3, 0.1, 0.3, 0.8))]


@pytest.mark.parametrize(("data", "period", "params"), CASES)
def test_one_step_errors_match_statsmodels(data, period, params, request) -> None:
    y = request.getfixturevalue(data)
    errors, _ = one_step_errors(y, period, *params)
    np.testing.assert_allclose(errors, np.asarray(_oracle(y, period, params).resid),
                               rtol=0, atol=1e-9)


@pytest.mark.parametrize(("data", "period", "params"), CASES)
def test_forecast_mean_and_variance_match_statsmodels(data, period, params, request) -> None:
    y = request.getfixturevalue(data)
    _, (level, trend, season) = one_step_errors(y, period, *params)
    fit = LocalTrendFit(*params, period, level, trend, season, sigma=1.0, nobs=y.size)
    mean, var = forecast_moments(fit, 30)
    oracle = _oracle(y, period, params)
    np.testing.assert_allclose(mean, np.asarray(oracle.forecast(30)), rtol=0, atol=1e-9)
    # statsmodels' relative forecast variance at step h is var_h / sigma^2 (class 1 model)
    rel = np.array([oracle._relative_forecast_variance(h) for h in range(1, 31)])
    np.testing.assert_allclose(var, rel, rtol=1e-12)


def test_variance_formula_by_hand() -> None:
    # Hyndman et al. (2008), Table 6.1, class 1: v_3 = sigma^2 (1 + c_1^2 + c_2^2) with
    # c_j = alpha + beta phi_j + gamma [j mod m = 0]; here m = 2 so c_2 gets gamma
    a, b, g, phi, s = 0.5, 0.1, 0.2, 0.9, 2.0
    fit = LocalTrendFit(a, b, g, phi, 2, 0.0, 0.0, np.zeros(2), s, 10)
    c1, c2 = a + b * phi, a + b * (phi + phi**2) + g
    assert forecast_moments(fit, 3)[1][2] == pytest.approx(s**2 * (1 + c1**2 + c2**2),
                                                            rel=1e-14)


def test_simulated_paths_have_the_forecast_moments(co2) -> None:
    fit = fit_local_trend(co2, 12)
    paths = simulate_local_trend(np.random.default_rng(7), fit, 24, 40_000)
    mean, var = forecast_moments(fit, 24)
    sd = np.sqrt(var)
    # mean within 5 Monte Carlo standard errors; variance within 3% (40k draws: the s.e.
    # of a sample variance is about var * sqrt(2 / 40k) = 0.7%)
    np.testing.assert_array_less(np.abs(paths.mean(0) - mean), 5 * sd / np.sqrt(40_000))
    np.testing.assert_allclose(paths.var(0, ddof=1), var, rtol=0.03)


@pytest.mark.parametrize(("data", "period"), [("co2", 12), ("gdp", 0), ("gdp", 4)])
def test_fit_reaches_the_least_squares_minimum(data, period, request) -> None:
    """No point of a grid over the admissible weights, nor statsmodels' own maximum
    likelihood estimate (same initial states), has a smaller sum of squared one-step
    errors after the start-up rows than the fit."""
    y = request.getfixturevalue(data)
    fit = fit_local_trend(y, period)
    burn = 2 * period if period else 2

    def sse(a: float, b: float, g: float, phi: float) -> float:
        e = one_step_errors(y, period, a, b, g, phi)[0][burn:]
        return float(e @ e)

    best = sse(fit.alpha, fit.beta, fit.gamma, fit.phi)
    assert fit.sigma == pytest.approx(np.sqrt(best / (y.size - burn)), rel=1e-12)
    grid = np.linspace(0.05, 0.95, 7)
    for a, bf, gf, phi in itertools.product(grid, grid, grid if period else [0.0],
                                            np.linspace(*PHI_BOUNDS, 4)):
        assert best <= sse(a, a * bf, (1 - a) * gf, phi) * (1 + 1e-6)
    oracle = _ets_model(y, period).fit(disp=False)
    p = dict(zip(oracle.model.param_names, oracle.params, strict=True))
    g = p["smoothing_seasonal"] if period else 0.0
    assert best <= sse(p["smoothing_level"], p["smoothing_trend"], g,
                       p["damping_trend"]) * (1 + 1e-6)
    assert 0 < fit.beta < fit.alpha < 1 and PHI_BOUNDS[0] <= fit.phi <= PHI_BOUNDS[1]
    assert 0 <= fit.gamma < 1 - fit.alpha


def test_states_after_the_last_row_continue_the_recursion(co2) -> None:
    """Filtering the first 100 rows, then the rest from those states, gives the same
    errors as filtering all 120 at once (the season is rotated to the next period)."""
    params = (0.4, 0.05, 0.2, 0.9)
    full, end = one_step_errors(co2, 12, *params)
    head, state = one_step_errors(co2[:100], 12, *params)
    tail, end2 = one_step_errors(co2[100:], 12, *params, start=state)
    np.testing.assert_allclose(np.concatenate([head, tail]), full, atol=1e-10)
    np.testing.assert_allclose(end2[2], end[2], atol=1e-10)


@pytest.mark.parametrize(("y", "period", "message"), [
    (np.zeros((10, 2)), 0, "1-D"),
    (np.arange(20.0), 12, "at least 26 rows"),
    (np.arange(20.0), 1, "period must be"),
    (np.r_[np.arange(20.0), np.nan], 0, "finite"),
])
def test_bad_input(y, period, message) -> None:
    with pytest.raises(SpecificationError, match=message):
        fit_local_trend(y, period)


def test_warm_start_from_weights_at_their_bounds(co2) -> None:
    """A warm start from a fit whose weights sit at the edge (alpha rounded to 1 or 0)
    still fits (the logit of the start is clipped)."""
    base = fit_local_trend(co2, 12)
    for alpha in (1.0, 0.0):
        edge = LocalTrendFit(alpha, 0.0, 0.0, PHI_BOUNDS[1], 12, base.level, base.trend,
                             base.season, base.sigma, base.nobs)
        again = fit_local_trend(co2, 12, warm=edge)
        assert np.isfinite(again.sigma) and 0 < again.alpha < 1
