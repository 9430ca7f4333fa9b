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

import math
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cholesky, solve_triangular
from scipy.special import gammaln

from ._types import FloatArray
from .data import Design, explosive_message
from .errors import (
    ExplosiveDataError,
    NotPositiveDefiniteError,
    PriorsError,
    TooFewObservationsError,
)
from .shrinkage import NIWPrior

__all__ = [
    "Moments",
    "NIWPosterior",
    "collinear_after_scaling",
    "flat_posterior",
    "log_marginal_likelihood",
    "log_marginal_likelihood_fast",
    "log_multigamma",
    "posterior",
    "update_posterior",
]


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


def _chol_logdet(S: FloatArray, what: str) -> float:
    try:
        L = np.linalg.cholesky(S)
    except np.linalg.LinAlgError as exc:
        raise NotPositiveDefiniteError(f"{what} is not positive definite") from exc
    return 2.0 * float(np.sum(np.log(np.diag(L))))


def _stacked_least_squares(Ab: FloatArray, k: int) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Least squares of the last columns of ``Ab`` on its first k, from one QR.

    The R factor of [A, b] is [[R, Q'b], [0, R22]] with R22'R22 the residual
    cross-products (Golub & Van Loan, sec. 5.3), so Q and the residuals are never formed.
    Returns R (positive diagonal, R'R = A'A), the coefficients and R22.
    """
    Rab = np.linalg.qr(Ab, mode="r")
    sign = np.where(np.diag(Rab)[:k] < 0, -1.0, 1.0)[:, None]
    R, Qtb, R22 = Rab[:k, :k] * sign, Rab[:k, k:] * sign, Rab[k:, k:]
    d = np.diag(R)
    if d.size and (not np.all(np.isfinite(d)) or d.min() <= 1e-13 * d.max()):
        raise NotPositiveDefiniteError(
            "the regressors are collinear (posterior precision is singular); remove "
            "duplicate series or deterministic terms, or use a proper prior"
        )
    return R, _solve_upper(R, Qtb), R22


#: steady growth (orders of magnitude) that explains a singular posterior precision when
#: the regressors are not collinear; below :data:`priors.data.EXPLOSIVE_DECADES`, which
#: load_series refuses up front, because here the factorisation has already failed
_SINGULAR_GROWTH_DECADES = 3.0


def collinear_after_scaling(A: FloatArray) -> bool:
    """Whether the columns of ``A`` (rows, k) are linearly dependent once each is scaled
    to unit length: QR pivots below 1e-10 of the largest. Scaling removes differences of
    size between columns (units, explosive growth), so a True means genuine collinearity
    (e.g. a duplicated series), a False a failure caused by sizes alone."""
    norms = np.linalg.norm(A, axis=0)
    if A.shape[0] < A.shape[1] or not np.all(norms > 0):
        return True
    d = np.abs(np.diag(np.linalg.qr(A / norms, mode="r")))
    return not (np.all(np.isfinite(d)) and d.min() > 1e-10 * d.max())


def _explain_singular(exc: NotPositiveDefiniteError, design: Design,
                      regressors: FloatArray) -> PriorsError:
    """The error to raise for a singular posterior precision: :class:`ExplosiveDataError`
    when a series of ``design.Y`` (T, n) grows steadily by at least
    ``_SINGULAR_GROWTH_DECADES`` orders of magnitude and ``regressors`` (rows, k), the
    stacked data and prior rows, are not collinear after scaling; else ``exc`` itself
    (the collinearity message)."""
    message = explosive_message(design.Y, design.names, decades=_SINGULAR_GROWTH_DECADES)
    if message is None or collinear_after_scaling(regressors):
        return exc
    return ExplosiveDataError(message)


def _update(prior: NIWPrior, X: FloatArray, Y: FloatArray) -> NIWPosterior:
    """NIW update on data (X, Y) without dummies; log_ml of exactly these rows."""
    T, n = Y.shape
    k = X.shape[1]
    root = 1.0 / np.sqrt(prior.omega)
    stacked = np.zeros((T + k, k + n))  # [[X, Y], [diag(root), root * B0]]
    stacked[:T, :k] = X
    stacked[:T, k:] = Y
    stacked[T + np.arange(k), np.arange(k)] = root
    stacked[T:, k:] = prior.B0 * root[:, None]
    R, B, R22 = _stacked_least_squares(stacked, k)
    S = prior.S0 + R22.T @ R22
    S = 0.5 * (S + S.T)
    df = prior.df + T
    logdet_P = 2.0 * float(np.sum(np.log(np.diag(R))))
    return NIWPosterior(B, R, S, df, _log_ml_terms(T, n, prior, logdet_P, S))


def posterior(design: Design, prior: NIWPrior) -> NIWPosterior:
    """Posterior of a VAR under an NIW prior plus its dummy observations.

    The log marginal likelihood is that of the data alone:
    log p([Y; Y_d]) - log p(Y_d) (Giannone, Lenza & Primiceri 2015).

    Raises :class:`ExplosiveDataError` instead of the collinearity error when the
    precision is singular because a series explodes (see :func:`_explain_singular`).
    """
    try:
        return _posterior(design, prior)
    except NotPositiveDefiniteError as exc:
        stacked = np.vstack([design.X, prior.Xd, np.diag(1.0 / np.sqrt(prior.omega))])
        raise _explain_singular(exc, design, stacked) from exc


def _posterior(design: Design, prior: NIWPrior) -> NIWPosterior:
    """:func:`posterior` without the explanation of a singular precision: the tuning's
    candidates (through :func:`log_marginal_likelihood`) keep NotPositiveDefiniteError."""
    if prior.Yd.shape[0] == 0:
        return _update(prior, design.X, design.Y)
    post = _update(prior, np.vstack([design.X, prior.Xd]), np.vstack([design.Y, prior.Yd]))
    dummies_only = _update(prior, prior.Xd, prior.Yd)
    assert post.log_ml is not None and dummies_only.log_ml is not None
    return NIWPosterior(post.B, post.R, post.S, post.df, post.log_ml - dummies_only.log_ml)


def log_marginal_likelihood(design: Design, prior: NIWPrior) -> float:
    """log p(Y | prior) in closed form (matrix-variate t; GLP 2015, appendix).

    A singular posterior precision raises NotPositiveDefiniteError whatever its cause:
    the hyperparameter search treats it as a candidate to skip."""
    lml = _posterior(design, prior).log_ml
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
    try:
        R, B, R22 = _stacked_least_squares(np.hstack([design.X, design.Y]), k)
    except NotPositiveDefiniteError as exc:
        raise _explain_singular(exc, design, design.X) from exc
    S = R22.T @ R22
    return NIWPosterior(B, R, 0.5 * (S + S.T), float(T - k), None)


@dataclass(frozen=True)
class Moments:
    """A design's data with its cross-products, computed once for repeated evaluations.

    X (T, k), Y (T, n), XtX (k, k), XtY (k, n).
    """

    X: FloatArray
    Y: FloatArray
    XtX: FloatArray
    XtY: FloatArray

    @classmethod
    def of(cls, design: Design) -> Moments:
        X, Y = design.X, design.Y
        return cls(X, Y, X.T @ X, X.T @ Y)


def log_multigamma(a: float, d: int) -> float:
    """log of the multivariate gamma function Gamma_d(a), a > (d - 1) / 2:
    d (d - 1) / 4 log(pi) + sum_j log Gamma(a - j / 2), j = 0..d-1 (Anderson, *An
    Introduction to Multivariate Statistical Analysis*, 3rd ed., sec. 7.2). scipy's
    ``multigammaln`` gives the same; this skips its argument checks, several times its
    cost at the small d of a marginal likelihood evaluated in a loop."""
    if not a > 0.5 * (d - 1):
        raise ValueError(f"the multivariate gamma needs a > (d - 1) / 2; got a={a}, d={d}")
    return float(0.25 * d * (d - 1) * math.log(math.pi)
                 + gammaln(a - 0.5 * np.arange(d)).sum())


def _log_ml_terms(T: int, n: int, prior: NIWPrior, logdet_P: float, S: FloatArray) -> float:
    df = prior.df + T
    return float(
        -0.5 * n * T * np.log(np.pi)
        + log_multigamma(0.5 * df, n)
        - log_multigamma(0.5 * prior.df, n)
        - 0.5 * n * float(np.sum(np.log(prior.omega)))
        - 0.5 * n * logdet_P
        + 0.5 * prior.df * _chol_logdet(prior.S0, "prior scale S0")
        - 0.5 * df * _chol_logdet(0.5 * (S + S.T), "posterior scale S")
    )


def _scale_from_residuals(prior: NIWPrior, B: FloatArray, *blocks: FloatArray) -> FloatArray:
    """S = S0 + sum of E'E over residual blocks + (B - B0)' Omega0^-1 (B - B0)."""
    D = (B - prior.B0) / np.sqrt(prior.omega)[:, None]
    S = prior.S0 + D.T @ D
    for E in blocks:
        S = S + E.T @ E
    return S


def _dummy_log_ml(prior: NIWPrior) -> float:
    """log p(Y_d) under the NIW prior, by Woodbury: O(k T_d^2) for T_d << k rows."""
    Xd, Yd, omega = prior.Xd, prior.Yd, prior.omega
    Td, n = Yd.shape
    XO = Xd * omega[None, :]  # Xd Omega0, (Td, k)
    Lc = np.linalg.cholesky(np.eye(Td) + XO @ Xd.T)
    logdet_P = -float(np.sum(np.log(omega))) + 2.0 * float(np.sum(np.log(np.diag(Lc))))
    # B = P^-1 (Omega0^-1 B0 + Xd'Yd) with P^-1 = Omega0 - Omega0 Xd' C^-1 Xd Omega0
    r = prior.B0 / omega[:, None] + Xd.T @ Yd
    Or = r * omega[:, None]
    B = Or - XO.T @ np.linalg.solve(Lc.T, np.linalg.solve(Lc, Xd @ Or))
    S = _scale_from_residuals(prior, B, Yd - Xd @ B)
    return _log_ml_terms(Td, n, prior, logdet_P, S)


def log_marginal_likelihood_fast(moments: Moments, prior: NIWPrior) -> float:
    """log p(Y | prior) from precomputed cross-products (Cholesky route).

    Same value as :func:`log_marginal_likelihood` up to rounding (tested to 1e-9): the
    scale S is formed from residuals, not as a difference of large cross-products. Cost:
    one k x k Cholesky, two triangular solves with n right-hand sides and one T x k x n
    product, plus O(k T_d^2) for the dummy observations.
    """
    n = moments.Y.shape[1]
    Xd, Yd, omega = prior.Xd, prior.Yd, prior.omega
    P = moments.XtX + Xd.T @ Xd
    P[np.diag_indices_from(P)] += 1.0 / omega
    r = moments.XtY + Xd.T @ Yd + prior.B0 / omega[:, None]
    try:
        L = cholesky(P, lower=True, check_finite=False)
    except np.linalg.LinAlgError as exc:
        raise NotPositiveDefiniteError("posterior precision is not positive definite") from exc
    B = solve_triangular(L, solve_triangular(L, r, lower=True, check_finite=False),
                         lower=True, trans=1, check_finite=False)
    S = _scale_from_residuals(prior, B, moments.Y - moments.X @ B, Yd - Xd @ B)
    logdet_P = 2.0 * float(np.sum(np.log(np.diag(L))))
    lml = _log_ml_terms(moments.Y.shape[0] + Yd.shape[0], n, prior, logdet_P, S)
    if Yd.shape[0]:
        lml -= _dummy_log_ml(prior)
    return lml


def update_posterior(post: NIWPosterior, X: FloatArray, Y: FloatArray) -> NIWPosterior:
    """The posterior after T_new more rows (X, Y), exactly, without refitting.

    The old posterior acts as the prior: P_new = P + X'X, B_new = P_new^-1 (P B + X'Y),
    S_new = S + (Y - X B_new)'(Y - X B_new) + (B_new - B)' P (B_new - B),
    nu_new = nu + T_new (recursive least squares; Kadiyala & Karlsson 1997). One QR of
    the stacked rows [R, R B; X, Y] gives R_new and the residual cross-products. The log
    marginal likelihood grows by log p(Y_new | Y_old), the same closed form with the old
    posterior as prior (None stays None for the improper flat prior).
    """
    T, n = Y.shape
    k = post.k
    if T == 0:
        return post
    R, B, R22 = _stacked_least_squares(
        np.vstack([np.hstack([post.R, post.R @ post.B]), np.hstack([X, Y])]), k)
    S = post.S + R22.T @ R22
    S = 0.5 * (S + S.T)
    df = post.df + T
    log_ml = None
    if post.log_ml is not None:
        logdet_old = 2.0 * float(np.sum(np.log(np.diag(post.R))))
        logdet_new = 2.0 * float(np.sum(np.log(np.diag(R))))
        log_ml = float(
            post.log_ml
            - 0.5 * n * T * np.log(np.pi)
            + log_multigamma(0.5 * df, n)
            - log_multigamma(0.5 * post.df, n)
            + 0.5 * n * (logdet_old - logdet_new)
            + 0.5 * post.df * _chol_logdet(post.S, "posterior scale S")
            - 0.5 * df * _chol_logdet(S, "updated posterior scale S")
        )
    return NIWPosterior(B, R, S, df, log_ml)
