"""Exact i.i.d. draws from a Normal-inverse-Wishart posterior.

Sigma by the Bartlett decomposition (Smith & Hocking 1972): with A lower triangular,
A_jj = sqrt(chi2(nu - j + 1)) and A_jl ~ N(0, 1) below the diagonal, ``M = L_S A^-T``
gives ``Sigma = M M' ~ IW(S, nu)`` where ``L_S L_S' = S``; S is never inverted.
B by ``B = B_bar + R^-1 Z M'`` with Z (k, n) standard normal, so that
``Cov(vec B | Sigma) = Sigma (x) P^-1``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_triangular

from ._types import FloatArray
from .conjugate import NIWPosterior
from .errors import NotPositiveDefiniteError, SpecificationError

__all__ = ["Draws", "draw_sigma_roots", "sample_posterior"]


@dataclass(frozen=True)
class Draws:
    """Posterior draws: B (S, k, n) and Sigma (S, n, n)."""

    B: FloatArray
    Sigma: FloatArray

    @property
    def size(self) -> int:
        return self.B.shape[0]


def check_size(size: int) -> int:
    if int(size) != size or size < 1:
        raise SpecificationError(f"number of draws must be a positive integer; got {size!r}")
    return int(size)


def draw_sigma_roots(rng: np.random.Generator, S: FloatArray, df: float, size: int) -> FloatArray:
    """Square roots M of Sigma ~ IW(S, df): Sigma = M M'. Returns (size, n, n)."""
    n = S.shape[0]
    if not df > n - 1:
        raise SpecificationError(f"inverse-Wishart needs df > n - 1; got df={df}, n={n}")
    try:
        L_S = np.linalg.cholesky(S)
    except np.linalg.LinAlgError as exc:
        raise NotPositiveDefiniteError("posterior scale S is not positive definite") from exc
    A = np.zeros((size, n, n))
    chi_df = df - np.arange(n)
    A[:, np.arange(n), np.arange(n)] = np.sqrt(rng.chisquare(chi_df, size=(size, n)))
    rows, cols = np.tril_indices(n, k=-1)
    if rows.size:
        A[:, rows, cols] = rng.standard_normal((size, rows.size))
    # M = L_S A^-T, i.e. M' = A^-1 L_S'. A is lower triangular: solve A M' = L_S'.
    Mt = np.linalg.solve(A, np.broadcast_to(L_S.T, (size, n, n)))
    return np.swapaxes(Mt, 1, 2)


def sample_posterior(rng: np.random.Generator, post: NIWPosterior, size: int) -> Draws:
    """``size`` exact i.i.d. draws of (B, Sigma) from the posterior."""
    size = check_size(size)
    k, n = post.B.shape
    M = draw_sigma_roots(rng, post.S, post.df, size)
    Z = rng.standard_normal((size, k, n))
    ZM = Z @ np.swapaxes(M, 1, 2)  # (S, k, n)
    flat = np.moveaxis(ZM, 0, 1).reshape(k, size * n)
    dev = solve_triangular(post.R, flat, lower=False, check_finite=False)
    B = post.B[None] + np.moveaxis(dev.reshape(k, size, n), 1, 0)
    Sigma = M @ np.swapaxes(M, 1, 2)
    return Draws(B, Sigma)
