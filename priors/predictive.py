"""Simulated predictive paths of a VAR under an NIW posterior.

Two samplers of the same distribution:

- :func:`simulate_paths` never forms B. The forecast needs B only through ``B'x_h``
  and, with ``B = B_bar + R^-1 Z M'``, ``B'x_h = B_bar'x_h + M Z'v_h`` where
  ``v_h = R^-T x_h``. The vectors ``Z'v_1, ..., Z'v_H`` are jointly normal with
  ``Cov(Z'v_g, Z'v_h) = (v_g'v_h) I_n``, so they can be drawn step by step by
  orthogonalising the v_h as they appear (Gram-Schmidt, twice for stability): O(k^2)
  flops and 2n normals per draw and step instead of O(k^2 n) flops and k*n normals per
  draw.
- :func:`simulate_paths_from_draws` uses explicit (B, Sigma) draws; needed when draws are
  screened (explosive-draw rejection) or come from another sampler.

Shapes: ``history`` is (p, n), oldest row first; ``exog_rows`` is (h, m); paths are
(S, h, n) in model units.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import solve_triangular

from ._types import FloatArray
from .conjugate import NIWPosterior
from .sampling import Draws, check_size, draw_sigma_roots

__all__ = ["companion_spectral_radius", "simulate_paths", "simulate_paths_from_draws"]


def _regressors(exog_row: FloatArray, lagbuf: FloatArray) -> FloatArray:
    """x for every draw: (S, k) from the (m,) deterministic row and (S, p, n) lags."""
    S = lagbuf.shape[0]
    return np.concatenate([np.broadcast_to(exog_row, (S, exog_row.size)),
                           lagbuf.reshape(S, -1)], axis=1)


def _start_lags(history: FloatArray, size: int) -> FloatArray:
    """(S, p, n) buffer with the most recent observation first."""
    return np.repeat(history[::-1][None], size, axis=0)


def simulate_paths(
    rng: np.random.Generator,
    post: NIWPosterior,
    history: FloatArray,
    exog_rows: FloatArray,
    size: int,
) -> FloatArray:
    """Draw ``size`` predictive paths of ``h = len(exog_rows)`` steps, (S, h, n)."""
    size = check_size(size)
    h = exog_rows.shape[0]
    k, n = post.B.shape
    M = draw_sigma_roots(rng, post.S, post.df, size)
    lagbuf = _start_lags(history, size)
    Q = np.empty((size, h, k))
    coef = np.zeros((size, h))
    W = np.empty((size, h, n))
    paths = np.empty((size, h, n))
    for step in range(h):
        x = _regressors(exog_rows[step], lagbuf)
        mean = x @ post.B
        v = solve_triangular(post.R, x.T, lower=False, trans=1, check_finite=False).T
        r = v
        coef[:] = 0.0
        if step:
            Qp = Q[:, :step]
            for _ in range(2):  # classical Gram-Schmidt, repeated once
                c = np.einsum("sgk,sk->sg", Qp, r)
                r = r - np.einsum("sg,sgk->sk", c, Qp)
                coef[:, :step] += c
        rho = np.linalg.norm(r, axis=1)
        # once h > k the v_h are linearly dependent: no new direction, no new normal
        rho = np.where(rho > 1e-9 * np.linalg.norm(v, axis=1), rho, 0.0)
        Q[:, step] = r / np.where(rho > 0, rho, 1.0)[:, None] * (rho > 0)[:, None]
        coef[:, step] = rho
        W[:, step] = rng.standard_normal((size, n))
        ztv = np.einsum("sg,sgn->sn", coef[:, : step + 1], W[:, : step + 1])
        e = ztv + rng.standard_normal((size, n))
        y = mean + np.einsum("sij,sj->si", M, e)
        paths[:, step] = y
        lagbuf = np.concatenate([y[:, None], lagbuf[:, :-1]], axis=1)
    return paths


def simulate_paths_from_draws(
    rng: np.random.Generator, draws: Draws, history: FloatArray, exog_rows: FloatArray
) -> FloatArray:
    """Predictive paths from explicit draws, one path per draw, (S, h, n)."""
    size = draws.size
    h = exog_rows.shape[0]
    n = draws.Sigma.shape[1]
    L = np.linalg.cholesky(draws.Sigma)
    lagbuf = _start_lags(history, size)
    paths = np.empty((size, h, n))
    for step in range(h):
        x = _regressors(exog_rows[step], lagbuf)
        y = np.einsum("sk,skn->sn", x, draws.B)
        y += np.einsum("sij,sj->si", L, rng.standard_normal((size, n)))
        paths[:, step] = y
        lagbuf = np.concatenate([y[:, None], lagbuf[:, :-1]], axis=1)
    return paths


def companion_spectral_radius(B: FloatArray, n_det: int, lags: int) -> FloatArray:
    """Largest absolute eigenvalue of the companion matrix of each draw.

    Parameters
    ----------
    B : (S, k, n) or (k, n) coefficient draws.

    Returns
    -------
    (S,) spectral radii (a scalar array for one B).
    """
    B = np.asarray(B)
    single = B.ndim == 2
    if single:
        B = B[None]
    S, _, n = B.shape
    np_ = n * lags
    C = np.zeros((S, np_, np_))
    C[:, :n, :] = np.swapaxes(B[:, n_det:, :], 1, 2)
    if lags > 1:
        C[:, n:, :-n] = np.eye(np_ - n)
    radius = np.abs(np.linalg.eigvals(C)).max(axis=1)
    return radius[0] if single else radius
