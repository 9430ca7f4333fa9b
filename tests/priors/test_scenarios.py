"""Conditional forecasts: exact Gaussian conditioning, ranges, transforms, ragged edges.

References: Waggoner & Zha (1999), "Conditional forecasts in dynamic multivariate
models", REStat 81(4): a hard-conditioned draw equals standard multivariate-normal
conditioning of the stacked future path given the parameters. The truncated-normal
oracle is scipy.stats.truncnorm; the range sampler is also checked against plain
rejection sampling, which is exact but wasteful.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from priors.errors import MissingValuesError, SpecificationError, TimeIndexError
from priors.model import FanfoldVAR
from priors.scenarios import Condition, conditional_paths, model_unit_conditions

from .helpers import two_lines

# A fixed VAR(2) with n = 2 and a constant: theta known, no parameter uncertainty.
N, P, H = 2, 2, 4
A1 = np.array([[0.5, 0.2], [0.3, 0.4]])
A2 = np.array([[-0.2, 0.0], [0.1, 0.1]])
CONST = np.array([1.0, -0.5])
SIGMA = np.array([[1.0, 0.6], [0.6, 2.0]])
HISTORY = np.array([[0.3, -1.0], [1.2, 0.4]])  # oldest first


def _theta(S):
    B = np.vstack([CONST[None], A1.T, A2.T])  # (k, n), k = 1 + 2 * 2
    M = np.linalg.cholesky(SIGMA)
    return np.repeat(B[None], S, axis=0), np.repeat(M[None], S, axis=0)


def _stacked_moments():
    """Mean (H*n,) and covariance of the stacked path, built from the companion form
    independently of the code under test."""
    F = np.zeros((N * P, N * P))
    F[:N, :N], F[:N, N:] = A1, A2
    F[N:, :N] = np.eye(N)
    J = np.hstack([np.eye(N), np.zeros((N, N))])
    Phi = [J @ np.linalg.matrix_power(F, i) @ J.T for i in range(H)]
    M = np.linalg.cholesky(SIGMA)
    Psi = np.zeros((H * N, H * N))
    for t in range(H):
        for s in range(t + 1):
            Psi[t * N:(t + 1) * N, s * N:(s + 1) * N] = Phi[t - s] @ M
    mean, y1, y2 = [], HISTORY[1], HISTORY[0]
    for _ in range(H):
        y = CONST + A1 @ y1 + A2 @ y2
        mean.append(y)
        y1, y2 = y, y1
    return np.concatenate(mean), Psi @ Psi.T


def _gaussian_condition(mu, cov, idx, values):
    """Standard multivariate-normal conditioning on x[idx] = values."""
    rest = np.setdiff1d(np.arange(mu.size), idx)
    gain = cov[np.ix_(rest, idx)] @ np.linalg.inv(cov[np.ix_(idx, idx)])
    m = mu.copy()
    m[rest] = mu[rest] + gain @ (values - mu[idx])
    m[idx] = values
    c = np.zeros_like(cov)
    c[np.ix_(rest, rest)] = cov[np.ix_(rest, rest)] - gain @ cov[np.ix_(idx, rest)]
    return m, c


def _run(conditions, S=200_000, seed=0, sweeps=25):
    B, M = _theta(S)
    cset = model_unit_conditions(conditions, ("none", "none"), HISTORY[-1], H)
    return conditional_paths(np.random.default_rng(seed), B, M, HISTORY,
                             np.ones((H, 1)), cset, n_det=1, sweeps=sweeps)


def _cell(series, step):
    return (step - 1) * N + series


def _check_moments(paths, mu, cov, free):
    flat = paths.reshape(paths.shape[0], -1)
    S = flat.shape[0]
    se = np.sqrt(np.diag(cov)[free] / S)
    z = (flat[:, free].mean(axis=0) - mu[free]) / se
    # Bonferroni over the free cells, family-wise 1e-3 (|z| < 4.06 for up to 20 tests)
    assert np.all(np.abs(z) < 4.06), z
    emp = np.cov(flat[:, free], rowvar=False)
    # covariance entries: se of a sample covariance ~ sqrt((s_ii s_jj + s_ij^2) / S)
    sd = np.sqrt(np.diag(cov)[free])
    se_cov = np.sqrt((np.outer(sd**2, sd**2) + cov[np.ix_(free, free)] ** 2) / S)
    assert np.all(np.abs(emp - cov[np.ix_(free, free)]) < 5 * se_cov)


def test_hard_conditions_equal_gaussian_conditioning():
    # Waggoner & Zha (1999): partial path of series 0 at steps 1 and 3, series 1 at 4.
    conds = [Condition(0, 1, 2.0, 2.0), Condition(0, 3, 0.5, 0.5), Condition(1, 4, -1.0, -1.0)]
    out = _run(conds)
    mu, cov = _stacked_moments()
    idx = np.array([_cell(0, 1), _cell(0, 3), _cell(1, 4)])
    m, c = _gaussian_condition(mu, cov, idx, np.array([2.0, 0.5, -1.0]))
    flat = out.conditional.reshape(out.conditional.shape[0], -1)
    np.testing.assert_allclose(flat[:, idx], np.broadcast_to([2.0, 0.5, -1.0], (flat.shape[0], 3)),
                               atol=1e-9)
    _check_moments(out.conditional, m, c, np.setdiff1d(np.arange(H * N), idx))


def test_baseline_is_the_unconditional_predictive():
    out = _run([Condition(0, 2, 3.0, 3.0)], S=100_000)
    mu, cov = _stacked_moments()
    _check_moments(out.baseline, mu, cov, np.arange(H * N))


def test_conditioning_on_the_mean_path_keeps_the_mean():
    # Conditioning series 0 on its own unconditional mean path leaves every conditional
    # mean at the unconditional mean (the gain multiplies a zero surprise).
    mu, cov = _stacked_moments()
    conds = [Condition(0, t, mu[_cell(0, t)], mu[_cell(0, t)]) for t in range(1, H + 1)]
    out = _run(conds)
    idx = np.array([_cell(0, t) for t in range(1, H + 1)])
    m, c = _gaussian_condition(mu, cov, idx, mu[idx])
    np.testing.assert_allclose(m, mu)
    _check_moments(out.conditional, m, c, np.setdiff1d(np.arange(H * N), idx))
    # its prior percentile is one half (exact normal probability per draw)
    np.testing.assert_allclose(out.prior_probability, 0.5, atol=1e-12)


def test_a_range_that_never_binds_changes_nothing():
    mu, cov = _stacked_moments()
    wide = [Condition(1, 2, mu[_cell(1, 2)] - 40, mu[_cell(1, 2)] + 40)]
    out = _run(wide, S=20_000, seed=3)
    assert out.soft_probability == 1.0
    np.testing.assert_allclose(out.prior_probability, 1.0)
    for cell in range(H * N):
        res = stats.ks_2samp(out.conditional.reshape(20_000, -1)[:, cell],
                             out.baseline.reshape(20_000, -1)[:, cell])
        assert res.pvalue > 1e-3 / (H * N)
    # an unbounded range is no condition at all
    none = model_unit_conditions([Condition(0, 1, -np.inf, np.inf)], ("none", "none"),
                                 HISTORY[-1], H)
    assert none.size == 0


def test_one_range_gives_the_truncated_normal_and_its_regression():
    # One range on cell (series 1, step 2): the cell follows scipy's truncated normal; a
    # correlated cell's mean moves by the regression on the truncated mean.
    mu, cov = _stacked_moments()
    j = _cell(1, 2)
    sd = np.sqrt(cov[j, j])
    lo, hi = mu[j] + 0.5 * sd, mu[j] + 2.0 * sd
    S = 40_000
    out = _run([Condition(1, 2, lo, hi)], S=S, seed=4)
    cell = out.conditional.reshape(S, -1)[:, j]
    oracle = stats.truncnorm((lo - mu[j]) / sd, (hi - mu[j]) / sd, loc=mu[j], scale=sd)
    assert stats.kstest(cell, oracle.cdf).pvalue > 1e-3
    k = _cell(0, 3)
    expect = mu[k] + cov[k, j] / cov[j, j] * (oracle.mean() - mu[j])
    var_k = cov[k, k] - cov[k, j] ** 2 / cov[j, j] + (cov[k, j] / cov[j, j]) ** 2 * oracle.var()
    got = out.conditional.reshape(S, -1)[:, k]
    assert abs(got.mean() - expect) < 4.5 * np.sqrt(var_k / S)
    p_inside = stats.norm.cdf(2.0) - stats.norm.cdf(0.5)
    np.testing.assert_allclose(out.prior_probability, p_inside, rtol=1e-9)
    assert abs(out.soft_probability - p_inside) < 5 * np.sqrt(p_inside * (1 - p_inside) / S)


def test_correlated_ranges_match_rejection_sampling():
    # Three binding ranges on strongly correlated cells, plus a fixed value: the Gibbs
    # draws must follow the same law as exact rejection sampling from the baseline
    # conditioned on the fixed value (acceptance here is a few percent, so rejection is
    # still affordable in a test).
    mu, cov = _stacked_moments()
    fixed = Condition(1, 1, mu[_cell(1, 1)] + 1.0, mu[_cell(1, 1)] + 1.0)
    cells = [(0, 2), (0, 3), (0, 4)]
    ranges = [Condition(s, t, mu[_cell(s, t)] + 0.4, mu[_cell(s, t)] + 3.0) for s, t in cells]
    S = 30_000
    out = _run([fixed, *ranges], S=S, seed=5)
    hard_only = _run([fixed], S=600_000, seed=6).conditional.reshape(600_000, -1)
    idx = [_cell(s, t) for s, t in cells]
    keep = np.all((hard_only[:, idx] >= [mu[i] + 0.4 for i in idx])
                  & (hard_only[:, idx] <= [mu[i] + 3.0 for i in idx]), axis=1)
    exact = hard_only[keep]
    assert exact.shape[0] > 5_000
    gibbs = out.conditional.reshape(S, -1)
    for cell in range(H * N):
        if cell == _cell(1, 1):
            continue
        res = stats.ks_2samp(gibbs[:, cell], exact[:, cell])
        assert res.pvalue > 1e-3 / (H * N - 1), (cell, res)
    assert abs(out.soft_probability - keep.mean()) < 0.01


def test_ranges_are_respected_by_every_draw():
    mu, _ = _stacked_moments()
    out = _run([Condition(0, 2, -np.inf, mu[_cell(0, 2)] - 2.5),
                Condition(1, 3, mu[_cell(1, 3)] + 3.0, np.inf)], S=5_000, seed=7)
    y = out.conditional
    assert np.all(y[:, 1, 0] <= mu[_cell(0, 2)] - 2.5)
    assert np.all(y[:, 2, 1] >= mu[_cell(1, 3)] + 3.0)
    assert out.soft_probability < 0.01  # far in the tails: reported, nothing discarded


# ------------------------------------------------------------------ validation
@pytest.mark.parametrize("cond, match", [
    (Condition(2, 1, 1.0, 1.0), "unknown series"),
    (Condition(0, 0, 1.0, 1.0), "outside the forecast horizon"),
    (Condition(0, H + 1, 1.0, 1.0), "outside the forecast horizon"),
    (Condition(0, 1, 2.0, 1.0), "above upper"),
    (Condition(0, 1, np.nan, 1.0), "missing bound"),
])
def test_bad_conditions_are_refused(cond, match):
    with pytest.raises(SpecificationError, match=match):
        model_unit_conditions([cond], ("none", "none"), HISTORY[-1], H)


def test_two_conditions_on_one_cell_are_refused():
    with pytest.raises(SpecificationError, match="two conditions"):
        model_unit_conditions([Condition(0, 1, 1.0, 1.0), Condition(0, 1, 0.0, 2.0)],
                              ("none", "none"), HISTORY[-1], H)


def test_levels_a_log_series_cannot_reach():
    with pytest.raises(SpecificationError, match="cannot reach"):
        model_unit_conditions([Condition(0, 1, -3.0, -3.0)], ("log", "none"), [5.0, 1.0], H)
    # a lower bound at or below zero is no bound for a log series
    cs = model_unit_conditions([Condition(0, 1, 0.0, 10.0)], ("log", "none"), [5.0, 1.0], H)
    assert cs.lower[0] == -np.inf and cs.upper[0] == pytest.approx(np.log(10.0))


# ------------------------------------------------------------------ facade
def _demand():
    return two_lines()


@pytest.mark.parametrize("transform", ["none", "log", "diff", "logdiff", "log1p"])
def test_fixed_values_hold_exactly_in_user_units(transform):
    frame = _demand()
    model = FanfoldVAR(lags=2, tightness=0.2, transforms={"tyres": transform}).fit(frame)
    cond = [model.condition("tyres", 2, value=260.0),
            model.condition("tyres", "2025-04-01", value=250.0, horizon=6),
            model.condition("inner_tubes", 5, lower=380.0, upper=400.0)]
    sc = model.scenario(6, cond, rng=np.random.default_rng(2), draws=400)
    np.testing.assert_allclose(sc.forecast.paths[:, 1, 0], 260.0, rtol=1e-10)
    np.testing.assert_allclose(sc.forecast.paths[:, 3, 0], 250.0, rtol=1e-10)
    assert np.all((sc.forecast.paths[:, 4, 1] >= 380.0 - 1e-9)
                  & (sc.forecast.paths[:, 4, 1] <= 400.0 + 1e-9))
    table = sc.table()
    assert list(table["kind"]) == ["value", "value", "range"]
    assert list(table["date"]) == ["2025-02-01", "2025-04-01", "2025-05-01"]
    # conditioning tyres high pulls inner tubes (a positive cross-effect) up on average
    assert sc.forecast.mean()[2, 1] != sc.baseline.mean()[2, 1]


def test_condition_arguments_are_checked():
    model = FanfoldVAR(lags=1, tightness=0.2).fit(_demand())
    with pytest.raises(SpecificationError, match="unknown series"):
        model.condition("chains", 1, value=1.0)
    with pytest.raises(SpecificationError, match="not both"):
        model.condition("tyres", 1, value=1.0, lower=0.0)
    with pytest.raises(SpecificationError, match="give a value"):
        model.condition("tyres", 1)
    with pytest.raises(SpecificationError, match="not a forecast period"):
        model.condition("tyres", "2030-01-01", value=1.0, horizon=3)


def test_ragged_edge_forecast_conditions_on_the_known_cells():
    frame = _demand()
    ragged = frame.copy()
    ragged.iloc[-1, 1] = np.nan  # inner tubes not yet known for the last month
    # the second-to-last row is complete here, so only one period is ragged
    model = FanfoldVAR(lags=2, tightness=0.2).fit(ragged)
    assert model.ragged_ is not None and model.ragged_.values.shape == (1, 2)
    np.testing.assert_array_equal(model.posterior_.B, FanfoldVAR(lags=2, tightness=0.2)
                                  .fit(frame.iloc[:-1]).posterior_.B)
    fc = model.forecast(3, rng=np.random.default_rng(1), draws=300)
    assert fc.horizon == 4 and fc.dates[0] == frame.index[-1]
    np.testing.assert_allclose(fc.paths[:, 0, 0], frame.iloc[-1, 0], rtol=1e-12)
    assert np.std(fc.paths[:, 0, 1]) > 0  # the missing cell is drawn, not fixed


def test_ragged_edge_refuses_empty_rows_and_conditions_on_known_cells():
    frame = _demand()
    empty = frame.copy()
    empty.iloc[-1] = np.nan
    with pytest.raises(MissingValuesError, match="no value for any series"):
        FanfoldVAR(lags=1).fit(empty)
    ragged = frame.copy()
    ragged.iloc[-1, 1] = np.nan
    model = FanfoldVAR(lags=1, tightness=0.2).fit(ragged)
    with pytest.raises(SpecificationError, match="already known"):
        model.scenario(2, [model.condition("tyres", 1, value=5.0)],
                       rng=np.random.default_rng(0), draws=10)


def test_append_replaces_the_ragged_rows():
    frame = _demand()
    ragged = frame.copy()
    ragged.iloc[-1, 1] = np.nan
    model = FanfoldVAR(lags=2, tightness=0.2).fit(ragged)
    updated = model.append(frame.iloc[-1:])
    assert updated.ragged_ is None
    np.testing.assert_array_equal(updated.series_.levels, frame.to_numpy())
    again = updated.append(ragged.iloc[-1:].set_axis([frame.index[-1] + pd.offsets.MonthBegin()]))
    assert again.ragged_ is not None and again.series_.nobs == updated.series_.nobs


def test_ragged_rows_must_keep_the_calendar():
    frame = _demand()
    skipped = frame.copy()
    skipped.iloc[-1, 1] = np.nan
    idx = skipped.index.to_list()
    idx[-1] = idx[-1] + pd.offsets.MonthBegin()  # a month missing before the last row
    skipped.index = pd.DatetimeIndex(idx)
    with pytest.raises(TimeIndexError):
        FanfoldVAR(lags=1).fit(skipped)
