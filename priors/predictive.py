"""Simulated predictive paths of a VAR under an NIW posterior.

:func:`simulate_paths` draws from the posterior predictive with one of two exact
samplers of the same distribution:

- "projection" (the default) never forms B. The forecast needs B only through ``B'x_h``
  and, with ``B = B_bar + R^-1 Z M'`` and shocks ``M z_h``,
  ``y_h = B_bar'x_h + M (Z'v_h + z_h)`` where ``v_h = R^-T x_h``. Given the path so far
  the vectors ``u_h = Z'v_h + z_h`` are jointly normal with
  ``Cov(u_g, u_h) = (v_g'v_h + [g == h]) I_n`` (rotation invariance of Z), so they are
  drawn step by step from the Cholesky factor of that Gram matrix, grown one row per
  step: O(h k^2) flops and n normals per draw and step instead of O(k^2 n) flops and
  k n normals per draw. The inner loop is compiled (:mod:`priors._kernels`).
- "explicit" draws (B, Sigma) and runs the recursion: O(k^2 n) per draw once, then
  O(k n) per step. Kept as an independent check of the projection sampler.

:func:`simulate_paths_from_draws` runs the recursion for given draws, e.g. draws screened
for explosive dynamics or drawn by another sampler.

Shapes: ``history`` is (p, n), oldest row first; ``exog_rows`` is (h, m); paths are
(S, h, n) in model units (the projection sampler returns a view of an (h, n, S) array,
the layout the quantile kernel reads).
"""

from __future__ import annotations

import threading

import numpy as np
from scipy.linalg import solve_triangular

from ._kernels import bartlett_roots, gram_shock_step
from ._types import FloatArray
from .cancellation import checkpoint
from .conjugate import NIWPosterior
from .errors import SpecificationError
from .sampling import Draws, bartlett_factors, check_size, draw_sigma_roots

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


#: bytes of stored v_h per block of draws in the projection sampler: about the L2 cache
#: of a core (measured fastest between 1 and 4 MiB at n=7..20, p=12..13)
_BLOCK_BYTES = 2 * 1024 * 1024


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

    ``method``: "projection", "explicit" or "auto" (projection: the faster one at every
    size measured, see tests/benchmarks). Both are exact; the same seed gives the same
    paths for the same method.
    """
    if method not in METHODS:
        raise SpecificationError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    size = check_size(size)
    if method == "explicit":
        return _simulate_explicit(rng, post, history, exog_rows, size)
    return _simulate_projected(rng, post, history, exog_rows, size)


_local = threading.local()


#: largest work buffer kept between calls, per thread (bigger ones are not kept, so a
#: server's thread pool holds at most this much per thread)
_KEEP_DOUBLES = 1 << 20  # 8 MiB


def _workspace(doubles: int) -> FloatArray:
    """A float64 work buffer of at least ``doubles`` entries, kept per thread when small.

    Reusing it spares the page faults of fresh large arrays on every forecast (measured
    at about a third of the sampler's time for n=3, p=4); one buffer per thread keeps
    concurrent forecasts apart.
    """
    buf = getattr(_local, "buf", None)
    if buf is not None and buf.size >= doubles:
        return buf
    buf = np.empty(doubles)
    if doubles <= _KEEP_DOUBLES:
        _local.buf = buf
    return buf


def _simulate_projected(
    rng: np.random.Generator,
    post: NIWPosterior,
    history: FloatArray,
    exog_rows: FloatArray,
    size: int,
) -> FloatArray:
    """The projection sampler, (S, h, n).

    With ``B = B_bar + R^-1 Z M'`` and shocks ``M z_h``, ``y_h = B_bar'x_h + M u_h`` with
    ``u_h = Z'v_h + z_h`` and ``v_h = R^-T x_h``. Given the paths so far, the u_h are
    jointly normal with ``Cov(u_g, u_h) = (v_g'v_h + [g == h]) I_n``, so
    ``u_h = sum_g L_hg w_g`` with i.i.d. N(0, I_n) vectors w_g and L the Cholesky factor
    of that Gram matrix plus I, grown one row per step (n normals per step and draw).
    Because of the + I every pivot is >= 1: no breakdown when the v_h are dependent.

    Draws run in blocks (draws on the last axis) whose stored v_h fit in cache. Per
    step, one BLAS product over the block gives the simulated parts of ``B_bar'x_h``
    and ``R^-T x_h`` (only the lags already simulated differ between draws); the
    compiled kernel :func:`priors._kernels.gram_shock_step` does the rest.
    """
    size = check_size(size)
    h, m = exog_rows.shape
    k, n = post.B.shape
    p = history.shape[0]
    Rinv = solve_triangular(post.R, np.eye(k), lower=False, check_finite=False)
    # [B_bar | R^-1]' with the lag blocks in reverse order (lag p first): the simulated
    # lags of a step, oldest first, are then one contiguous slice of the block's paths
    # and of these columns. Columns of R^-1 before m are zero in the lag rows.
    lag_rows = np.arange(m, k).reshape(p, n)[::-1].ravel()
    BRt = np.ascontiguousarray(np.concatenate([post.B[lag_rows], Rinv[lag_rows, m:]], axis=1).T)
    past = history[::-1].reshape(-1)  # lag 1 first, (p n,)
    fixed_x = np.zeros((h, k))
    for step in range(h):
        w = n * min(step, p)
        fixed_x[step, :m] = exog_rows[step]
        fixed_x[step, m + w :] = past[: n * p - w]
    mean_fix = fixed_x @ post.B  # (h, n)
    v_fix = fixed_x @ Rinv  # (h, k)
    paths = np.empty((h, n, size))  # returned as the (S, h, n) view
    # blocks of equal size; the last one is padded with draws that are thrown away
    block = -(-size // -(-size * h * k * 8 // _BLOCK_BYTES))
    nblocks = -(-size // block)
    L_S, diag, below = bartlett_factors(rng, post.S, post.df, nblocks * block)
    sizes = {"V": h * k, "L": h * h, "out": h * n, "scratch": h + n + 2}
    per_block = block * sum(sizes.values())
    buf = _workspace(per_block + nblocks * block * h * n)
    work, at = {}, 0
    for name, rows in sizes.items():  # contiguous (..., block) views of the work space
        work[name] = buf[at : at + rows * block]
        at += rows * block
    V, L = work["V"].reshape(h, k, block), work["L"].reshape(h, h, block)
    out, scratch = work["out"].reshape(h, n, block), work["scratch"].reshape(-1, block)
    none = buf[:0].reshape(0, block)
    W_all = buf[per_block : per_block + nblocks * block * h * n].reshape(nblocks, h, n, block)
    rng.standard_normal(out=W_all)
    for b, lo in enumerate(range(0, nblocks * block, block)):
        checkpoint()
        M = bartlett_roots(L_S, diag[lo : lo + block], below[lo : lo + block])  # (n, n, s)
        for step in range(h):
            lags = min(step, p)
            G = out[step - lags : step].reshape(n * lags, block) if lags else none
            if lags:
                G = BRt[:, n * (p - lags) :] @ G  # (n + k - m, s)
            gram_shock_step(V, L, W_all[b], M, G, v_fix[step], mean_fix[step], out, step,
                            m, scratch)
        keep = min(block, size - lo)
        paths[..., lo : lo + keep] = out[..., :keep]
    return paths.transpose(2, 0, 1)


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
        checkpoint()
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
        checkpoint()
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
