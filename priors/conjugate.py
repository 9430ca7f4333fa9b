"""Closed-form natural-conjugate Normal-inverse-Wishart posterior and marginal likelihood.

Posterior (Kadiyala & Karlsson 1997; Banbura, Giannone & Reichlin 2010)::

    P     = Omega0^-1 + X'X             (posterior precision of the rows of B)
    B_bar = P^-1 (Omega0^-1 B0 + X'Y)
    S_bar = S0 + E'E + (B_bar - B0)' Omega0^-1 (B_bar - B0),   E = Y - X B_bar
    nu    = nu0 + T
    B | Sigma, Y ~ MN(B_bar, P^-1, Sigma),   Sigma | Y ~ IW(S_bar, nu)

The prior enters as k extra rows ``Omega0^-1/2 [B0, I]``, and B_bar and the triangular
factor R of P (R'R = P) come from one QR factorisation of the stacked regressors, which
is accurate even when X'X is badly conditioned (levels data). No k x k inverse is formed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_triangular
from scipy.special import multigammaln

from ._types import FloatArray
from .data import Design
from .errors import NotPositiveDefiniteError, TooFewObservationsError
from .shrinkage import NIWPrior

__all__ = ["NIWPosterior", "flat_posterior", "log_marginal_likelihood", "posterior"]


@dataclass(frozen=True)
class NIWPosterior:
    """Normal-inverse-Wishart posterior of (B, Sigma).

    B : (k, n) posterior mean of B.
    R : (k, k) upper triangular with positive diagonal, R'R = posterior precision P.
    S : (n, n) inverse-Wishart scale.  df : degrees of freedom nu.
    log_ml : log marginal likelihood (None for the improper flat prior).
    """

    B: FloatArray
    R: FloatArray
    S: FloatArray
    df: float
    log_ml: float | None

    @property
    def k(self) -> int:
        return self.B.shape[0]

    @property
    def n(self) -> int:
        return self.B.shape[1]

    def sigma_mean(self) -> FloatArray:
        """E[Sigma | Y] = S / (nu - n - 1), (n, n)."""
        return self.S / (self.df - self.n - 1)

    def row_cov_diag(self) -> FloatArray:
        """Diagonal of P^-1, (k,): from R^-1 by a triangular inverse."""
        Rinv = _solve_upper(self.R, np.eye(self.k))
        return np.einsum("ij,ij->i", Rinv, Rinv)


def _solve_upper(R: FloatArray, rhs: FloatArray, *, trans: bool = False) -> FloatArray:
    return solve_triangular(R, rhs, lower=False, trans=1 if trans else 0, check_finite=False)


def _qr_r(A: FloatArray, b: FloatArray) -> tuple[FloatArray, FloatArray]:
    """R with positive diagonal and Q'b for A = QR (A is (N, k), N >= k)."""
    Q, R = np.linalg.qr(A, mode="reduced")
    sign = np.where(np.diag(R) < 0, -1.0, 1.0)
    R = R * sign[:, None]
    Qtb = (Q.T @ b) * sign[:, None]
    d = np.abs(np.diag(R))
    if d.size and (not np.all(np.isfinite(d)) or d.min() <= 1e-13 * d.max()):
        raise NotPositiveDefiniteError(
            "the regressors are collinear (posterior precision is singular); remove "
            "duplicate series or deterministic terms, or use a proper prior"
        )
    return R, Qtb


def _chol_logdet(S: FloatArray, what: str) -> float:
    try:
        L = np.linalg.cholesky(S)
    except np.linalg.LinAlgError as exc:
        raise NotPositiveDefiniteError(f"{what} is not positive definite") from exc
    return 2.0 * float(np.sum(np.log(np.diag(L))))


def _update(prior: NIWPrior, X: FloatArray, Y: FloatArray) -> NIWPosterior:
    """NIW update on data (X, Y) without dummies; log_ml of exactly these rows."""
    T, n = Y.shape
    root = 1.0 / np.sqrt(prior.omega)
    A = np.vstack([X, np.diag(root)])
    b = np.vstack([Y, prior.B0 * root[:, None]])
    R, Qtb = _qr_r(A, b)
    B = _solve_upper(R, Qtb)
    resid = b - A @ B
    S = prior.S0 + resid.T @ resid
    S = 0.5 * (S + S.T)
    df = prior.df + T
    logdet_P = 2.0 * float(np.sum(np.log(np.diag(R))))
    log_ml = (
        -0.5 * n * T * np.log(np.pi)
        + multigammaln(0.5 * df, n)
        - multigammaln(0.5 * prior.df, n)
        - 0.5 * n * float(np.sum(np.log(prior.omega)))
        - 0.5 * n * logdet_P
        + 0.5 * prior.df * _chol_logdet(prior.S0, "prior scale S0")
        - 0.5 * df * _chol_logdet(S, "posterior scale S")
    )
    return NIWPosterior(B, R, S, df, float(log_ml))


def posterior(design: Design, prior: NIWPrior) -> NIWPosterior:
    """Posterior of a VAR under an NIW prior plus its dummy observations.

    The log marginal likelihood is that of the data alone:
    log p([Y; Y_d]) - log p(Y_d) (Giannone, Lenza & Primiceri 2015).
    """
    if prior.Yd.shape[0] == 0:
        return _update(prior, design.X, design.Y)
    post = _update(prior, np.vstack([design.X, prior.Xd]), np.vstack([design.Y, prior.Yd]))
    dummies_only = _update(prior, prior.Xd, prior.Yd)
    assert post.log_ml is not None and dummies_only.log_ml is not None
    return NIWPosterior(post.B, post.R, post.S, post.df, post.log_ml - dummies_only.log_ml)


def log_marginal_likelihood(design: Design, prior: NIWPrior) -> float:
    """log p(Y | prior) in closed form (matrix-variate t; GLP 2015, appendix)."""
    lml = posterior(design, prior).log_ml
    assert lml is not None
    return lml


def flat_posterior(design: Design) -> NIWPosterior:
    """Flat prior on B and Jeffreys prior p(Sigma) ~ |Sigma|^-(n+1)/2.

    Posterior: B | Sigma ~ MN(B_ols, (X'X)^-1, Sigma), Sigma ~ IW(E'E, T - k), so the
    posterior mean of B is the OLS estimate exactly. Needs T - k > n + 1 for E[Sigma].
    """
    T, n, k = design.nobs, design.n, design.k
    if T - k <= n + 1:
        raise TooFewObservationsError(
            f"the flat prior needs more rows than regressors + series + 1: {T} rows for "
            f"{k} regressors and {n} series; use the Minnesota prior, fewer lags or more data"
        )
    R, Qtb = _qr_r(design.X, design.Y)
    B = _solve_upper(R, Qtb)
    resid = design.Y - design.X @ B
    S = resid.T @ resid
    return NIWPosterior(B, R, 0.5 * (S + S.T), float(T - k), None)
