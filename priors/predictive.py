"""Simulated predictive paths of a VAR under an NIW posterior.

:func:`simulate_paths` draws from the posterior predictive with one of two exact
samplers of the same distribution, whichever is cheaper for the model's size:

- "projection" never forms B. The forecast needs B only through ``B'x_h``
  and, with ``B = B_bar + R^-1 Z M'``, ``B'x_h = B_bar'x_h + M Z'v_h`` where
  ``v_h = R^-T x_h``. The vectors ``Z'v_1, ..., Z'v_H`` are jointly normal with
  ``Cov(Z'v_g, Z'v_h) = (v_g'v_h) I_n``, so they can be drawn step by step by
  orthogonalising the v_h as they appear (classical Gram-Schmidt, twice for
  stability; for h <= k/2 an update of the inverse Cholesky factor of their Gram
  matrix, which needs one pass over the stored vectors): O(k^2) flops and 2n normals per
  draw and step instead of O(k^2 n) flops and k*n normals per draw.
- "explicit" draws (B, Sigma) and runs the recursion: O(k^2 n) per draw once, then
  O(k n) per step. It is the cheaper one for small models (n < h and k < 2h; measured
  2.6x faster at n=3, p=4, h=12).

:func:`simulate_paths_from_draws` runs the recursion for given draws, e.g. draws screened
for explosive dynamics or drawn by another sampler.

Shapes: ``history`` is (p, n), oldest row first; ``exog_rows`` is (h, m); paths are
(S, h, n) in model units.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import solve_triangular

from ._types import FloatArray
from .conjugate import NIWPosterior
from .errors import SpecificationError
from .sampling import Draws, check_size, draw_sigma_roots

__all__ = [
    "METHODS",
    "companion_spectral_radius",
    "recursion_with_shocks",
    "simulate_paths",
    "simulate_paths_from_draws",
]


def _regressors(exog_row: FloatArray, lagbuf: FloatArray) -> FloatArray:
    """x for every draw: (S, k) from the (m,) deterministic row and (S, p, n) lags."""
    S = lagbuf.shape[0]
    return np.concatenate([np.broadcast_to(exog_row, (S, exog_row.size)),
                           lagbuf.reshape(S, -1)], axis=1)


def _start_lags(history: FloatArray, size: int) -> FloatArray:
    """(S, p, n) buffer with the most recent observation first."""
    return np.repeat(history[::-1][None], size, axis=0)


#: draws per block in :func:`simulate_paths`: keeps the (block, h, k) basis in cache
_BLOCK_DOUBLES = 8_000_000


METHODS = ("auto", "projection", "explicit")


def simulate_paths(
    rng: np.random.Generator,
    post: NIWPosterior,
    history: FloatArray,
    exog_rows: FloatArray,
    size: int,
    *,
    method: str = "auto",
) -> FloatArray:
    """Draw ``size`` predictive paths of ``h = len(exog_rows)`` steps, (S, h, n).

    ``method``: "projection", "explicit" or "auto" (explicit when n < h and h > k/2,
    i.e. few series and few regressors; projection otherwise). Both are exact; the same
    seed gives the same paths for the same method.
    """
    if method not in METHODS:
        raise SpecificationError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    size = check_size(size)
    n, h = post.B.shape[1], exog_rows.shape[0]
    k = post.B.shape[0]
    if method == "explicit" or (method == "auto" and n < h and 2 * h > k):
        return _simulate_explicit(rng, post, history, exog_rows, size)
    return _simulate_projected(rng, post, history, exog_rows, size)


def _simulate_projected(
    rng: np.random.Generator,
    post: NIWPosterior,
    history: FloatArray,
    exog_rows: FloatArray,
    size: int,
) -> FloatArray:
    """The projection sampler, (S, h, n).

    Only numpy's BLAS runs inside the step loop (R^-1 is formed once), and draws are
    processed in blocks so the Gram-Schmidt basis stays in cache. Only the lags already
    simulated differ between draws, so ``x_h' B_bar`` and ``R^-T x_h`` are a shared part
    plus a product over the ``n * min(step, p)`` simulated entries.
    """
    size = check_size(size)
    h, m = exog_rows.shape
    k, n = post.B.shape
    p = history.shape[0]
    M = draw_sigma_roots(rng, post.S, post.df, size)
    # every path normal at once, in the order the step loop used to draw them
    normals = rng.standard_normal((h, 2, size, n))
    Rinv = solve_triangular(post.R, np.eye(k), lower=False, check_finite=False)
    past = history[::-1].reshape(-1)  # lag 1 first, (p n,)
    rev = np.empty((size, h, n))  # paths newest first: step t at position h - 1 - t
    nblocks = -(-size * h * k // _BLOCK_DOUBLES)  # ceil: blocks of equal size
    block = -(-size // nblocks)
    # h <= k/2: update the Cholesky factor of the Gram matrix of the v_h (one pass over
    # the stored v_h per step); otherwise the v_h may become dependent and classical
    # Gram-Schmidt, repeated once, is kept for its accuracy.
    gram = 2 * h <= k
    Q = np.empty((h, block, k))  # step-major: batched dot products run faster
    Lg = np.zeros((block, h, h)) if gram else None  # inverse Cholesky factor of the Gram
    coef = np.zeros((block, h))
    for lo in range(0, size, block):
        hi = min(lo + block, size)
        s = hi - lo
        Qb, cb, Mb, out = Q[:, :s], coef[:s], M[lo:hi], rev[lo:hi]
        for step in range(h):
            lags = min(step, p)
            w = n * lags  # entries of x simulated in this block
            x_fix = np.concatenate([exog_rows[step], np.zeros(w), past[: n * p - w]])
            mean = np.broadcast_to(x_fix @ post.B, (s, n))
            v = np.broadcast_to(x_fix @ Rinv, (s, k))
            if w:
                x_sim = out[:, h - step : h - step + lags].reshape(s, w)  # lag 1 first
                mean = mean + x_sim @ post.B[m : m + w]
                v = v.copy()
                v[:, m:] += x_sim @ Rinv[m : m + w, m:]  # R^-1 is upper triangular
            cb[:] = 0.0
            if gram:
                _gram_step(Qb, Lg[:s], cb, v, step)
            else:
                _gram_schmidt_step(Qb, cb, v, step)
            e = np.einsum("sg,gsn->sn", cb[:, : step + 1], normals[: step + 1, 0, lo:hi])
            e += normals[step, 1, lo:hi]
            out[:, h - 1 - step] = mean + np.einsum("sij,sj->si", Mb, e)
    return np.ascontiguousarray(rev[:, ::-1])


def _gram_schmidt_step(Q: FloatArray, coef: FloatArray, v: FloatArray, step: int) -> None:
    """Orthonormalise v (s, k) against Q[:step] (Q is (h, s, k)); write Q[step] and
    coef[:, :step+1].

    coef[:, g] = q_g'v for g < step and coef[:, step] = the norm of the remainder, so
    Z'v = sum_g coef_g Z'q_g with independent N(0, I_n) vectors Z'q_g.
    """
    r = v
    if step:
        Qp = Q[:step]
        for _ in range(2):  # classical Gram-Schmidt, repeated once
            c = np.einsum("gsk,sk->sg", Qp, r)
            r = r - np.einsum("sg,gsk->sk", c, Qp)
            coef[:, :step] += c
    rho = np.linalg.norm(r, axis=1)
    # once h > k the v_h are linearly dependent: no new direction, no new normal
    rho = np.where(rho > 1e-9 * np.linalg.norm(v, axis=1), rho, 0.0)
    scale = np.divide(1.0, rho, out=np.zeros_like(rho), where=rho > 0)
    np.multiply(r, scale[:, None], out=Q[step])
    coef[:, step] = rho


def _gram_step(V: FloatArray, Linv: FloatArray, coef: FloatArray, v: FloatArray,
               step: int) -> None:
    """The same coefficients from the Cholesky factor L of the Gram matrix of V.

    V is (h, s, k); ``Linv`` holds L^-1 (lower triangular, per draw). The new row of L
    is l = L^-1 V[:step] v with diagonal rho = sqrt(v'v - l'l), and the new row of
    L^-1 is (-l' L^-1 / rho, 1 / rho), so no triangular solve is needed. A direction
    with rho = 0 (v dependent on earlier ones) gets a zero row. Stores v in V[step].
    """
    ell = coef[:, :step]
    if step:
        g = np.einsum("gsk,sk->sg", V[:step], v)
        np.einsum("sij,sj->si", Linv[:, :step, :step], g, out=ell)
    vv = np.einsum("sk,sk->s", v, v)
    rho2 = vv - np.einsum("sg,sg->s", ell, ell)
    rho = np.sqrt(np.where(rho2 > 1e-12 * vv, rho2, 0.0))
    inv = np.divide(1.0, rho, out=np.zeros_like(rho), where=rho > 0)
    if step:
        Linv[:, step, :step] = -np.einsum("sj,sji->si", ell, Linv[:, :step, :step]) * inv[:, None]
    Linv[:, step, step] = inv
    coef[:, step] = rho
    V[step] = v


def _simulate_explicit(
    rng: np.random.Generator,
    post: NIWPosterior,
    history: FloatArray,
    exog_rows: FloatArray,
    size: int,
) -> FloatArray:
    """Explicit draws without forming B: B_s'x = B_bar'x + M_s W_s'x, W_s = R^-1 Z_s.

    Same distribution as drawing B_s = B_bar + W_s M_s' (see
    :func:`priors.sampling.draw_coefficients`) and running the recursion, with M_s
    applied to n-vectors per step instead of to every (k, n) draw; (S, h, n).
    """
    k, n = post.B.shape
    h, m = exog_rows.shape
    p = history.shape[0]
    M = draw_sigma_roots(rng, post.S, post.df, size)
    Rinv = solve_triangular(post.R, np.eye(k), lower=False, check_finite=False)
    W = (Rinv @ rng.standard_normal((k, size * n))).reshape(k, size, n)
    W_lags_t = np.ascontiguousarray(W[m:].transpose(1, 2, 0))  # (S, n, n p)
    shocks = rng.standard_normal((h, size, n))
    if m:
        shocks += np.einsum("hm,msn->hsn", exog_rows, W[:m])
    det_mean = exog_rows @ post.B[:m]  # (h, n)
    B_lags = post.B[m:]
    buf = np.empty((size, h + p, n))  # position h - 1 - step holds step's value
    buf[:, h:] = history[::-1]
    for step in range(h):
        x = buf[:, h - step : h - step + p].reshape(size, p * n)  # lag 1 first
        u = np.einsum("snk,sk->sn", W_lags_t, x) + shocks[step]
        buf[:, h - 1 - step] = det_mean[step] + x @ B_lags + np.einsum("sij,sj->si", M, u)
    return np.ascontiguousarray(buf[:, h - 1 :: -1]) if h else buf[:, :0]


def _recursion(
    rng: np.random.Generator, B: FloatArray, M: FloatArray, history: FloatArray,
    exog_rows: FloatArray,
) -> FloatArray:
    """y_h = B_s'x_h + M_s z_h for each draw s, feeding paths back as lags; (S, h, n)."""
    size, _, n = B.shape
    h = exog_rows.shape[0]
    shocks = np.matmul(M, rng.standard_normal((size, n, h))).transpose(0, 2, 1)
    return recursion_with_shocks(B, shocks, history, exog_rows)


def recursion_with_shocks(
    B: FloatArray, shocks: FloatArray, history: FloatArray, exog_rows: FloatArray
) -> FloatArray:
    """y_h = B_s'x_h + e_{s,h} for given innovations e (S, h, n); paths (S, h, n).

    The deterministic part is formed for all steps at once. Values are stored newest
    first, so the p lags of every step are one contiguous window (lag 1 first) and each
    step costs one batched (n x np)(np) product.
    """
    size, _, n = B.shape
    h, m = exog_rows.shape
    p = history.shape[0]
    base = shocks
    if m:
        base = base + np.matmul(exog_rows[None], B[:, :m])
    buf = np.empty((size, h + p, n))  # position h - 1 - step holds step's value
    buf[:, h:] = history[::-1]
    B_lags_t = np.ascontiguousarray(B[:, m:].transpose(0, 2, 1))  # (S, n, np)
    for step in range(h):
        x = buf[:, h - step : h - step + p].reshape(size, p * n)
        buf[:, h - 1 - step] = base[:, step] + np.einsum("snk,sk->sn", B_lags_t, x)
    return np.ascontiguousarray(buf[:, h - 1 :: -1]) if h else buf[:, :0]


def simulate_paths_from_draws(
    rng: np.random.Generator, draws: Draws, history: FloatArray, exog_rows: FloatArray
) -> FloatArray:
    """Predictive paths from explicit draws, one path per draw, (S, h, n)."""
    return _recursion(rng, draws.B, np.linalg.cholesky(draws.Sigma), history, exog_rows)


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
