"""Known-date outlier periods with an estimated shock scale, inside the Gibbs sampler.

In the spirit of Lenza & Primiceri (2022): in an outlier period k (a promotion, a stock-out,
a supply shock) the shocks are scaled, ``e_t = s_k u_t`` with u_t ~ N(0, Sigma) and
s_k >= 1 to be estimated. Given the scales the model is the constant-volatility VAR on
rows divided by s_t, so the coefficient and Sigma steps stay exact; only the r outlier
rows change, by the weights v_t = 1 / s_t^2 <= 1.

- Coefficients: ``X~'X~ = X'X - X_o' D X_o`` with D = diag(1 - v) over the r outlier
  rows, a rank-r change. In equation i's eigen-coordinates (see :mod:`priors.gibbs`) the
  precision is ``M = Dc - c U D U'`` with Dc = 1 + c lam, U = Q_i' W_i^1/2 X_o'. Writing
  ``M = Dc^1/2 (I - V V') Dc^1/2``, V = sqrt(c) Dc^-1/2 U D^1/2, the mean uses Woodbury,
  ``(I - VV')^-1 = I + V (I - V'V)^-1 V'``, and the noise the symmetric root
  ``(I - VV')^-1/2 = I + V E diag(g) E' V'`` with ``V'V = E diag(s2) E'`` and
  ``g = ((1 - s2)^-1/2 - 1) / s2``: O(k r) extra work per equation, no factorisation of
  a k x k matrix.
- Scales: Lenza & Primiceri's Pareto(1, 1) prior on s_k (density s^-2 on s >= 1) is, for
  v_k = 1 / s_k^2, the density v^-1/2 / 2 on (0, 1]: a Gamma(1/2, rate 0) truncated to
  (0, 1]. The full conditional is therefore
  Gamma(1/2 + n |R_k| / 2, sum_{t in R_k} e_t' Sigma^-1 e_t / 2) truncated to (0, 1],
  drawn exactly by the inverse CDF.

Shapes: r outlier rows, K periods; d (C, r); scales (C, K).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special

from ._types import FloatArray, IntArray

__all__ = ["OutlierRows", "draw_scales", "outlier_rows", "weighted_cross_products"]

PRIOR_SHAPE, PRIOR_RATE = 0.5, 0.0  # Pareto(1, 1) on the scale (Lenza & Primiceri 2022)


@dataclass(frozen=True)
class OutlierRows:
    """The outlier rows of the data (dummies excluded): row indices (r,), their period
    (r,) in 0..K-1, X_o (r, k), Y_o (r, n), U (n, k, r) = Q_i' diag(wh_i) X_o'."""

    rows: IntArray
    period: IntArray
    K: int
    Xo: FloatArray
    Yo: FloatArray
    U: FloatArray


def outlier_rows(X: FloatArray, Y: FloatArray, rows: Sequence[int], period: Sequence[int],
                 Q: FloatArray, wh: FloatArray) -> OutlierRows:
    """Collect the outlier rows and project them into each equation's eigen-basis."""
    rows_a = np.asarray(rows, dtype=np.int64)
    per = np.asarray(period, dtype=np.int64)
    Xo, Yo = X[rows_a], Y[rows_a]
    U = np.einsum("nkj,nk,rk->njr", Q, wh, Xo)  # Q_i' (wh_i * X_o')
    K = int(per.max()) + 1 if per.size else 0
    return OutlierRows(rows_a, per, K, Xo, Yo, U)


def weighted_cross_products(XtX: FloatArray, XtY: FloatArray, YtY: FloatArray,
                            out: OutlierRows, d: FloatArray
                            ) -> tuple[FloatArray, FloatArray]:
    """X~'Y and Y~'Y per chain, (C, k, n) and (C, n, n), with d = 1 - v (C, r)."""
    XtYc = XtY[None] - np.einsum("rk,cr,rn->ckn", out.Xo, d, out.Yo)
    YtYc = YtY[None] - np.einsum("rn,cr,rm->cnm", out.Yo, d, out.Yo)
    return XtYc, YtYc


def low_rank_draw(t: FloatArray, z: FloatArray, Dc: FloatArray, c: FloatArray,
                  U: FloatArray, d: FloatArray) -> FloatArray:
    """mean + noise in eigen-coordinates for M = Dc - c U D U' (see the module notes).

    t, z, Dc : (C, k); c : (C, 1); U : (k, r); d : (C, r). Returns (C, k)."""
    root = 1.0 / np.sqrt(Dc)
    V = (np.sqrt(c) * root)[:, :, None] * U[None] * np.sqrt(d)[:, None, :]  # (C, k, r)
    Vt = V.transpose(0, 2, 1)
    VtV = Vt @ V  # (C, r, r), eigenvalues in [0, 1)
    y = (root * t)[:, :, None]
    mean = y + V @ np.linalg.solve(np.eye(U.shape[1]) - VtV, Vt @ y)
    s2, E = np.linalg.eigh(VtV)
    s2 = np.clip(s2, 0.0, 1.0 - 1e-12)
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.where(s2 > 1e-12, (1.0 / np.sqrt(1.0 - s2) - 1.0) / s2, 0.5)
    w = z[:, :, None]
    noise = w + V @ (E @ (g[:, :, None] * (E.transpose(0, 2, 1) @ (Vt @ w))))
    return root * (mean + noise)[:, :, 0]


def draw_scales(rngs: Sequence[np.random.Generator], B: FloatArray, Sigma: FloatArray,
                out: OutlierRows) -> FloatArray:
    """v_k = 1 / s_k^2 for every chain and period from its truncated Gamma full
    conditional; (C, K)."""
    C, n = B.shape[0], B.shape[2]
    E = out.Yo[None] - out.Xo[None] @ B  # (C, r, n)
    q = np.einsum("crn,cnm,crm->cr", E, np.linalg.inv(Sigma), E)
    rows_per = np.bincount(out.period, minlength=out.K)
    shape = PRIOR_SHAPE + n * rows_per / 2.0  # (K,)
    rate = PRIOR_RATE + np.stack([np.bincount(out.period, weights=q[c], minlength=out.K)
                                  for c in range(C)]) / 2.0  # (C, K)
    top = special.gammainc(shape[None], rate)  # P(v <= 1)
    u = np.stack([rng.random(out.K) for rng in rngs]) * top
    v = special.gammaincinv(shape[None], u) / rate
    # when almost no mass is below 1 the inverse CDF underflows: the truncated density is
    # then close to an exponential rising to v = 1, with slope (shape - 1) - rate
    tiny = ~(top > 1e-280) | ~np.isfinite(v) | (v <= 0)
    if tiny.any():
        slope = np.maximum(shape[None] - 1.0 - rate, 1.0)
        e = np.stack([rng.standard_exponential(out.K) for rng in rngs])
        v = np.where(tiny, np.maximum(1.0 - e / slope, 1e-12), v)
    return np.minimum(v, 1.0)
