"""Log predictive densities for h >= 1 and for transformed series.

References: with the parameters fixed, the h-step predictive of a VAR is Gaussian with
covariance sum_{i<h} Phi_i Sigma Phi_i' (Lutkepohl 2005, sec. 2.2.2), built here
independently from the companion form; the conjugate one-step predictive is the exact
multivariate t (Zellner 1971), which the mixture must approach; a change of variables
w = log y adds -sum log y (the Jacobian).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from priors.density import mixture_log_scores
from priors.errors import SpecificationError
from priors.model import FanfoldVAR

from .helpers import FIXED, two_lines

A1 = np.array([[0.5, 0.2], [0.3, 0.4]])
A2 = np.array([[-0.2, 0.0], [0.1, 0.1]])
C0 = np.array([1.0, -0.5])
SIGMA = np.array([[1.0, 0.6], [0.6, 2.0]])
HIST = np.array([[0.3, -1.0], [1.2, 0.4]])


def test_fixed_parameters_give_the_gaussian_h_step_density():
    H = 4
    F = np.zeros((4, 4))
    F[:2, :2], F[:2, 2:], F[2:, :2] = A1, A2, np.eye(2)
    J = np.hstack([np.eye(2), np.zeros((2, 2))])
    Phi = [J @ np.linalg.matrix_power(F, i) @ J.T for i in range(H)]
    means, y1, y2 = [], HIST[1], HIST[0]
    for _ in range(H):
        y = C0 + A1 @ y1 + A2 @ y2
        means.append(y)
        y1, y2 = y, y1
    w = np.array([[1.5, 0.0], [0.2, -1.0], [2.0, 1.0], [np.nan, 0.0]])
    B = np.vstack([C0[None], A1.T, A2.T])
    S = 3
    got = mixture_log_scores(np.repeat(B[None], S, 0), np.repeat(SIGMA[None], S, 0), HIST,
                             np.ones((H, 1)), w, [False, False], n_det=1)
    for h in range(3):
        V = sum(Phi[i] @ SIGMA @ Phi[i].T for i in range(h + 1))
        ref = stats.multivariate_normal(means[h], V).logpdf(w[h])
        assert got[h] == pytest.approx(ref, abs=1e-10)
    assert np.isnan(got[3])
    # a cumulative (differenced) outcome is the sum of the path's first h values
    cum = mixture_log_scores(np.repeat(B[None], S, 0), np.repeat(SIGMA[None], S, 0), HIST,
                             np.ones((H, 1)), w, [True, False], n_det=1)
    # Cov of (y1_1 + y1_2, y2_2): the stacked path covariance, mapped
    Psi = np.zeros((4, 4))
    M = np.linalg.cholesky(SIGMA)
    for t in range(2):
        for s_ in range(t + 1):
            Psi[2 * t:2 * t + 2, 2 * s_:2 * s_ + 2] = Phi[t - s_] @ M
    A = np.array([[1, 0, 1, 0], [0, 0, 0, 1]], dtype=float)
    V2 = A @ Psi @ Psi.T @ A.T
    mean2 = np.array([means[0][0] + means[1][0], means[1][1]])
    assert cum[1] == pytest.approx(stats.multivariate_normal(mean2, V2).logpdf(w[1]),
                                   abs=1e-10)


def test_the_one_step_mixture_approaches_the_exact_t():
    frame = two_lines(80, 2)
    model = FanfoldVAR(lags=1, tightness=0.3, **FIXED).fit(frame)
    y = frame.iloc[-1].to_numpy() * 1.02
    exact = model.one_step_log_density(y)
    d = model.sample(20_000, rng=np.random.default_rng(0))
    mix = mixture_log_scores(d.B, d.Sigma, model.series_.values[-1:], np.ones((1, 1)),
                             y[None], [False, False], n_det=1)[0]
    assert mix == pytest.approx(exact, abs=0.02)


def test_log_transform_scores_are_log_scores_minus_the_jacobian():
    frame = two_lines(90, 4)
    future = frame.iloc[-3:].to_numpy() * np.array([1.03, 0.98])
    on_logs = FanfoldVAR(lags=2, tightness=0.2).fit(np.log(frame))
    logged = FanfoldVAR(lags=2, tightness=0.2, transforms="log").fit(frame)
    a = logged.log_predictive_density(future, rng=np.random.default_rng(3))
    b = on_logs.log_predictive_density(np.log(future), rng=np.random.default_rng(3))
    np.testing.assert_allclose(a, b - np.log(future).sum(axis=1), rtol=1e-10)
    assert np.all(np.isfinite(a))


def test_differenced_one_step_score_equals_the_model_on_differences():
    frame = two_lines(90, 6)
    diffs = frame.diff().iloc[1:]
    nxt = frame.iloc[-1].to_numpy() + np.array([5.0, -7.0])
    a = FanfoldVAR(lags=1, tightness=0.2, transforms="diff").fit(frame)
    b = FanfoldVAR(lags=1, tightness=0.2, prior_mean=[0.0, 0.0]).fit(diffs)
    sa = a.log_predictive_density(nxt[None], rng=np.random.default_rng(1))
    sb = b.log_predictive_density((nxt - frame.iloc[-1].to_numpy())[None],
                                  rng=np.random.default_rng(1))
    np.testing.assert_allclose(sa, sb, rtol=1e-10)


def test_gibbs_models_score_by_their_draws_and_bad_shapes_are_refused():
    frame = two_lines(80, 3)
    model = FanfoldVAR(prior="independent", lags=1, chains=2, burn=50, keep=200).fit(
        frame, rng=np.random.default_rng(0))
    out = model.log_predictive_density(frame.iloc[-2:].to_numpy(), rng=np.random.default_rng(1))
    assert out.shape == (2,) and np.all(np.isfinite(out))
    with pytest.raises(SpecificationError, match="shape"):
        model.log_predictive_density(np.ones((2, 3)), rng=np.random.default_rng(1))
