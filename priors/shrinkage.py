"""The Minnesota prior in natural-conjugate form, with optional dummy observations.

Parameterisation (standard-deviation form; ``decay`` applies to the s.d.)::

    sd(own lag l)            = tightness / l**decay
    sd(lag l of series j, i) ~ tightness * sigma_i / (l**decay * sigma_j)
    sd(deterministic, i)     ~ det_scale * sigma_i
    sd(seasonal dummy, i)    ~ season_scale * sigma_i   (det_scale when None)

Natural-conjugate form (Kadiyala & Karlsson 1997; Giannone, Lenza & Primiceri 2015):
``B | Sigma ~ MN(B0, diag(omega), Sigma)``, ``Sigma ~ IW(diag(psi) * (nu0 - n - 1), nu0)``
with ``nu0 = n + 2`` so that ``E[Sigma] = diag(psi)``, and ``omega`` equal to
``(tightness / l**decay)**2 / psi_j`` for lag l of series j. Because the
coefficient covariance is ``Sigma (x) Omega0``, the cross-variable tightness is 1 in this
form; a different value needs an independent prior.

``psi`` are residual variances of univariate AR(p) regressions (with the model's
deterministic terms) on the estimation sample (Banbura, Giannone & Reichlin 2010).

Sum-of-coefficients (weight ``mu``) and dummy-initial-observation (weight ``delta``)
priors are extra rows (Y_d, X_d) appended to the data (Doan, Litterman & Sims 1984;
Sims 1993; Sims & Zha 1998); smaller weights mean tighter priors.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._types import FloatArray
from .data import Design, season_columns
from .errors import ConstantSeriesError, SpecificationError

__all__ = ["MinnesotaHyper", "NIWPrior", "ar_residual_variances", "minnesota_prior",
           "own_lag_means"]


#: accepted ranges: beyond them the prior variances under- or overflow
_RANGES = {
    "tightness": (1e-6, 1e3),
    "cross": (1e-6, 1e3),
    "det_scale": (1e-6, 1e8),
    "sum_coef": (1e-6, 1e6),
    "initial": (1e-6, 1e6),
    "season_scale": (1e-6, 1e8),
}


@dataclass(frozen=True)
class MinnesotaHyper:
    """Hyperparameters of the Minnesota prior.

    tightness : prior s.d. of a series' own first lag (lambda_1), > 0.
    cross : cross-variable tightness (lambda_2): other series' lags get s.d. scaled by
        this factor relative to own lags. The natural-conjugate form needs cross = 1
        (its coefficient covariance is Sigma (x) Omega0, one profile for every
        equation); other values need an independent prior.
    decay : lag decay exponent on the s.d. (1 = harmonic: s.d. ~ 1/l, variance ~ 1/l^2).
    det_scale : prior s.d. of deterministic/exogenous coefficients in units of the
        equation's residual s.d. (large = nearly flat).
    sum_coef : weight mu of the sum-of-coefficients dummies, None = off.
    initial : weight delta of the dummy-initial-observation, None = off.
    season_scale : prior s.d. of seasonal-dummy coefficients, in the same units as
        ``det_scale``; None = ``det_scale``. A proper, moderate scale (tuned by marginal
        likelihood) is what lets the marginal likelihood weigh seasonal dummies against
        none: under a nearly flat prior every dummy costs about log(det_scale) nats per
        equation whatever the data say (Lindley's paradox).
    """

    tightness: float = 0.2
    cross: float = 1.0
    decay: float = 1.0
    det_scale: float = 1000.0
    sum_coef: float | None = None
    initial: float | None = None
    season_scale: float | None = None

    def __post_init__(self) -> None:
        for name, (lo, hi) in _RANGES.items():
            v = getattr(self, name)
            if v is not None and not (np.isfinite(v) and lo <= v <= hi):
                raise SpecificationError(
                    f"{name} must be a number between {lo:g} and {hi:g}; got {v!r}"
                )
        if not (np.isfinite(self.decay) and self.decay >= 0):
            raise SpecificationError(f"decay must be >= 0; got {self.decay!r}")


@dataclass(frozen=True)
class NIWPrior:
    """Normal-inverse-Wishart prior plus dummy observations.

    B0 : (k, n) prior mean.  omega : (k,) diagonal of the row covariance Omega0.
    S0 : (n, n) inverse-Wishart scale.  df : nu0.
    Yd : (T_d, n), Xd : (T_d, k) dummy observations (T_d may be 0).
    """

    B0: FloatArray
    omega: FloatArray
    S0: FloatArray
    df: float
    Yd: FloatArray
    Xd: FloatArray


def ar_residual_variances(design: Design) -> FloatArray:
    """Residual variance of each series' own AR(p) with the deterministic terms, (n,).

    All n regressions in one batched QR of [Z_i, y_i] (T, m + p + 1): the last diagonal
    entry of R is the norm of the residual (Golub & Van Loan, sec. 5.3). When some Z_i is
    rank deficient, or there are no more rows than regressors, each series goes through
    ``lstsq`` (minimum-norm least squares) instead.
    """
    m, n, p, T = design.n_det, design.n, design.lags, design.nobs
    c = m + p
    rss = None
    if T > c:
        own = m + np.arange(p)[None, :] * n + np.arange(n)[:, None]  # (n, p) columns
        A = np.empty((n, T, c + 1))
        A[:, :, :m] = design.X[:, :m]
        A[:, :, m:c] = np.moveaxis(design.X[:, own], 1, 0)
        A[:, :, c] = design.Y.T
        R = np.linalg.qr(A, mode="r")  # (n, c + 1, c + 1)
        pivots = np.abs(np.diagonal(R, axis1=1, axis2=2)[:, :c])
        if np.all(pivots > 1e-10 * pivots.max(axis=1, keepdims=True)):
            rss = R[:, c, c] ** 2
    if rss is None:
        rss = np.empty(n)
        for i in range(n):
            Z = design.X[:, np.r_[0:m, m + i + n * np.arange(p)]]
            coef, *_ = np.linalg.lstsq(Z, design.Y[:, i], rcond=None)
            resid = design.Y[:, i] - Z @ coef
            rss[i] = resid @ resid
    out = rss / max(T - c, 1)
    for i in range(n):
        if not out[i] > 1e-12 * max(1.0, float(np.mean(design.Y[:, i] ** 2))):
            raise ConstantSeriesError(
                f"series {design.names[i]!r} is fitted exactly by its own lags, so its "
                "scale is zero; drop it or use a longer window"
            )
    return out


def lag_variance_profile(design: Design, psi: FloatArray, decay: float) -> FloatArray:
    """omega / tightness**2 for the lag rows, shape (n*p,): 1 / (l**(2*decay) * psi_j)."""
    lags = np.repeat(np.arange(1, design.lags + 1, dtype=np.float64), design.n)
    return 1.0 / (lags ** (2.0 * decay) * np.tile(psi, design.lags))


def det_variances(design: Design, det_scale: float,
                  season_scale: float | None = None) -> FloatArray:
    """omega for the deterministic/exogenous rows, shape (m,).

    Regressors are put on a common footing by their root mean square, so the prior
    s.d. of a coefficient is ``det_scale * sigma_i / rms(x)``; seasonal dummies use
    ``season_scale`` instead when it is given.
    """
    Xd = design.X[:, : design.n_det]
    rms = np.sqrt(np.mean(Xd**2, axis=0)) if design.nobs else np.ones(design.n_det)
    rms = np.where(rms > 0, rms, 1.0)
    scale = np.full(design.n_det, float(det_scale))
    if season_scale is not None:
        scale[season_columns(design)] = season_scale
    return scale**2 / rms**2


def initial_means(design: Design) -> FloatArray:
    """Mean of the p presample observations of each series (y-bar_0), shape (n,)."""
    m, n, p = design.n_det, design.n, design.lags
    first = design.X[0, m : m + n * p].reshape(p, n)
    return first.mean(axis=0)


def own_lag_means(prior_mean: FloatArray, n: int, lags: int) -> FloatArray:
    """Prior means of each series' own lags 1..lags, shape (lags, n).

    ``prior_mean`` is (n,) for the own first lag only (1 = random walk, 0 = white noise),
    or (L, n) for own lags 1..L (e.g. 1 at lag 12 of monthly data: a seasonal random
    walk); other coefficients have prior mean 0.
    """
    pm = np.asarray(prior_mean, dtype=np.float64)
    out = np.zeros((lags, n))
    if pm.shape == (n,):
        out[0] = pm
        return out
    if pm.ndim != 2 or pm.shape[1] != n:
        raise SpecificationError(f"prior_mean must have shape ({n},) or (lags, {n}); got "
                                 f"{pm.shape}")
    if np.any(pm[lags:] != 0):
        raise SpecificationError(f"prior_mean sets lag {pm.shape[0]} but the model has "
                                 f"{lags} lags; use at least {pm.shape[0]} lags")
    out[: min(lags, pm.shape[0])] = pm[:lags]
    return out


def prior_mean_block(prior_mean: FloatArray, n: int, lags: int) -> FloatArray:
    """The lag rows of B0, (n * lags, n): own-lag means on the diagonal of each block."""
    means = own_lag_means(prior_mean, n, lags)
    block = np.zeros((n * lags, n))
    for lag in range(lags):
        block[lag * n + np.arange(n), np.arange(n)] = means[lag]
    return block


def minnesota_prior(
    design: Design,
    hyper: MinnesotaHyper,
    prior_mean: FloatArray,
    psi: FloatArray | None = None,
) -> NIWPrior:
    """Build the natural-conjugate Minnesota prior for ``design``.

    Parameters
    ----------
    prior_mean : (n,) prior mean of each series' own first-lag coefficient, or (L, n) of
        own lags 1..L (:func:`own_lag_means`).
    psi : (n,) scales; default :func:`ar_residual_variances`.
    """
    n, m, k = design.n, design.n_det, design.k
    if hyper.cross != 1.0:
        raise SpecificationError(
            f"the natural-conjugate Minnesota prior has cross-variable tightness 1 "
            f"(got {hyper.cross:g}): its coefficient covariance Sigma (x) Omega0 gives every "
            "equation the same shrinkage profile, so other series' lags cannot be shrunk "
            "harder than own lags; use cross=1, or an independent Normal prior"
        )
    psi = ar_residual_variances(design) if psi is None else np.asarray(psi, dtype=np.float64)
    B0 = np.zeros((k, n))
    B0[m:] = prior_mean_block(prior_mean, n, design.lags)
    omega = np.concatenate([
        det_variances(design, hyper.det_scale, hyper.season_scale),
        hyper.tightness**2 * lag_variance_profile(design, psi, hyper.decay)])
    df = n + 2.0
    S0 = np.diag(psi * (df - n - 1))
    Yd, Xd = dummy_observations(design, hyper, prior_mean)
    return NIWPrior(B0, omega, S0, df, Yd, Xd)


def dummy_observations(
    design: Design, hyper: MinnesotaHyper, prior_mean: FloatArray
) -> tuple[FloatArray, FloatArray]:
    """Sum-of-coefficients and initial-observation rows, (T_d, n) and (T_d, k).

    Only series with a unit-root prior mean (own-lag means summing to 1: a random walk
    or a seasonal random walk) get a sum-of-coefficients row. Deterministic columns are
    0 except the constant in the initial observation.
    """
    n, m, k, p = design.n, design.n_det, design.k, design.lags
    ybar = initial_means(design)
    rows_y: list[FloatArray] = []
    rows_x: list[FloatArray] = []
    if hyper.sum_coef is not None:
        unit = np.isclose(own_lag_means(prior_mean, n, p).sum(axis=0), 1.0)
        for i in np.flatnonzero(unit):
            y = np.zeros(n)
            y[i] = ybar[i] / hyper.sum_coef
            x = np.zeros(k)
            x[m + i + n * np.arange(p)] = y[i]
            rows_y.append(y)
            rows_x.append(x)
    if hyper.initial is not None:
        y = ybar / hyper.initial
        x = np.zeros(k)
        if "const" in design.labels:
            x[design.labels.index("const")] = 1.0 / hyper.initial
        x[m:] = np.tile(y, p)
        rows_y.append(y)
        rows_x.append(x)
    if not rows_y:
        return np.empty((0, n)), np.empty((0, k))
    return np.array(rows_y), np.array(rows_x)
