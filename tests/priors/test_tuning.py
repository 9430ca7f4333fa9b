"""Hyperparameter and lag choice by marginal likelihood."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from priors.conjugate import log_marginal_likelihood
from priors.data import Deterministics, build_design, load_series
from priors.errors import ConvergenceWarning
from priors.model import FanfoldVAR
from priors.shrinkage import MinnesotaHyper, ar_residual_variances, minnesota_prior
from priors.tuning import (
    TightnessProfile,
    _newton_in_bracket,
    gamma_from_mode_sd,
    log_hyperprior,
    tune_hyperparameters,
)


def _design(y, lags, seasonal_period=None):
    det = Deterministics(constant=True, seasonal=seasonal_period is not None)
    return build_design(load_series(y, period=seasonal_period), lags, det)


@pytest.mark.parametrize("period", [None, 4])
def test_profile_equals_direct_marginal_likelihood(known_var, rng, period):
    # The eigendecomposition shortcut must equal the QR-based closed form.
    y = known_var.simulate(rng, 90) + 50.0
    design = _design(y, 3, period)
    psi = ar_residual_variances(design)
    pm = np.ones(design.n)
    base = MinnesotaHyper(decay=1.5, det_scale=30.0)
    profile = TightnessProfile(design, base, pm, psi)
    for lam in (0.01, 0.07, 0.3, 1.2, 4.0):
        hyper = MinnesotaHyper(tightness=lam, decay=1.5, det_scale=30.0)
        direct = log_marginal_likelihood(design, minnesota_prior(design, hyper, pm, psi))
        assert profile(lam) == pytest.approx(direct, rel=1e-9, abs=1e-6)


def _batched(f):
    return lambda xs: np.array([f(x) for x in xs])


@pytest.mark.parametrize(("f", "bracket", "start", "expected"), [
    (lambda x: -np.cosh(x - 0.7), (-1.0, 2.0), -0.9, 0.7),           # interior, smooth
    (lambda x: 3.0 * x - x**4, (0.0, 2.0), 1.9, 0.75 ** (1 / 3)),    # x* = (3/4)^(1/3)
    (lambda x: x, (0.0, 1.0), 0.5, 1.0),                              # at the upper end
    (lambda x: -x, (0.0, 1.0), 0.5, 0.0),                             # at the lower end
    (lambda x: -(x - 0.75) ** 2 if x < 0.8 else -np.inf, (0.0, 2.0), 0.1, 0.75),
    (lambda x: np.sin(x), (0.0, 3.0), 2.9, np.pi / 2),               # convex at the start
])
def test_newton_in_bracket_finds_the_maximiser(f, bracket, start, expected):
    # Maximisers known in closed form (calculus); tolerance as the tuner's (1e-6 in log)
    x, used = _newton_in_bracket(_batched(f), *bracket, start)
    assert x == pytest.approx(expected, abs=1e-6)
    assert used % 3 == 0 and used <= 180


def test_tuned_tightness_matches_bounded_brent_on_macrodata():
    # Reference library and open dataset: scipy's bounded Brent (xatol 1e-10) on the
    # marginal likelihood of a VAR(4) of US real GDP, consumption and investment growth
    # (statsmodels' macrodata), started from the tuner's own grid bracket.
    sm = pytest.importorskip("statsmodels.api")
    from scipy.optimize import minimize_scalar

    data = sm.datasets.macrodata.load_pandas().data
    y = 100 * np.diff(np.log(data[["realgdp", "realcons", "realinv"]].to_numpy()), axis=0)
    design = _design(y, 4)
    pm = np.zeros(design.n)
    for hyperprior in (False, True):
        res = tune_hyperparameters(design, MinnesotaHyper(), pm, hyperprior=hyperprior)
        psi = ar_residual_variances(design)
        profile = TightnessProfile(design, MinnesotaHyper(), pm, psi)

        def negative(u, hp=hyperprior, profile=profile):
            return -(profile(np.exp(u)) + (log_hyperprior("tightness", np.exp(u)) if hp else 0))

        grid = np.linspace(np.log(1e-4), np.log(5.0), 15)
        i = int(np.argmin([negative(g) for g in grid]))
        ref = minimize_scalar(negative, bounds=(grid[i - 1], grid[i + 1]), method="bounded",
                              options={"xatol": 1e-10})
        assert np.log(res.hyper.tightness) == pytest.approx(ref.x, abs=1e-6)
        assert res.objective == pytest.approx(-ref.fun, abs=1e-9)


def test_gamma_hyperprior_parameters_match_published_values():
    # Giannone, Lenza & Primiceri (2015) hyperpriors; values in the methods brief (N).
    assert gamma_from_mode_sd(0.2, 0.4) == pytest.approx((1.640388, 0.312311), abs=1e-6)
    assert gamma_from_mode_sd(1.0, 1.0) == pytest.approx((2.618034, 0.618034), abs=1e-6)
    from scipy import stats

    a, scale = gamma_from_mode_sd(0.2, 0.4)
    assert log_hyperprior("tightness", 0.3) == pytest.approx(
        stats.gamma(a, scale=scale).logpdf(0.3), rel=1e-12)


def test_tuned_tightness_maximises_marginal_likelihood(known_var, rng):
    y = known_var.simulate(rng, 120)
    design = _design(y, 2)
    pm = np.ones(design.n)
    res = tune_hyperparameters(design, MinnesotaHyper(), pm)
    grid = np.exp(np.linspace(np.log(0.01), np.log(3), 400))
    psi = ar_residual_variances(design)
    values = [log_marginal_likelihood(design, minnesota_prior(
        design, MinnesotaHyper(tightness=g), pm, psi)) for g in grid]
    assert res.log_ml >= max(values) - 1e-6
    assert res.hyper.tightness == pytest.approx(grid[int(np.argmax(values))], rel=0.03)


def test_joint_tuning_with_dummy_weights_improves_objective(known_var, rng):
    y = np.cumsum(known_var.simulate(rng, 100), axis=0) * 0.1 + 20.0  # trending levels
    design = _design(y, 2)
    pm = np.ones(design.n)
    base = MinnesotaHyper(sum_coef=1.0, initial=1.0)
    psi = ar_residual_variances(design)
    start = log_marginal_likelihood(design, minnesota_prior(design, base, pm, psi))
    res = tune_hyperparameters(design, base, pm, tune=("tightness", "sum_coef", "initial"))
    assert res.log_ml > start
    assert set(res.tuned) == {"tightness", "sum_coef", "initial"}


def test_hyperprior_pulls_towards_its_mode(known_var, rng):
    y = known_var.simulate(rng, 40)
    design = _design(y, 2)
    pm = np.ones(design.n)
    plain = tune_hyperparameters(design, MinnesotaHyper(), pm)
    with_prior = tune_hyperparameters(design, MinnesotaHyper(), pm, hyperprior=True)
    mode = 0.2
    assert abs(np.log(with_prior.hyper.tightness / mode)) <= abs(
        np.log(plain.hyper.tightness / mode)) + 1e-9
    assert with_prior.objective > with_prior.log_ml  # objective adds the log hyperprior


def test_tightness_at_search_bound_warns():
    # White noise with a white-noise prior mean: the data want no lag coefficients, so
    # the marginal likelihood rises as the tightness goes to 0 (the lower bound).
    y = np.random.default_rng(3).standard_normal((300, 2))
    design = _design(y, 1)
    with pytest.warns(ConvergenceWarning, match="edge of the search range"):
        tune_hyperparameters(design, MinnesotaHyper(), np.zeros(2))


def test_lag_order_chosen_by_marginal_likelihood_finds_true_order():
    # A VAR(3) whose third lag matters: marginal likelihood on a long sample picks 3.
    rng = np.random.default_rng(11)
    A3 = np.array([[0.5, 0.0], [0.0, -0.45]])
    y = np.zeros((700, 2))
    for t in range(3, 700):
        y[t] = 0.2 * y[t - 1] + A3 @ y[t - 3] + rng.standard_normal(2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        model = FanfoldVAR(lags="auto", max_lags=6, prior_mean=[0.0, 0.0]).fit(y[200:])
    assert model.lags_ == 3
    assert [c.lags for c in model.lag_search_] == list(range(1, 7))
    scores = {c.lags: c.score for c in model.lag_search_}
    assert scores[3] == max(scores.values())
