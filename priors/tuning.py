"""Choosing hyperparameters and the lag order by marginal likelihood.

Empirical Bayes (Giannone, Lenza & Primiceri 2015): maximise ``log p(Y | gamma)``, or
with ``hyperprior=True`` the posterior mode ``log p(Y | gamma) + log p(gamma)`` under
GLP's Gamma hyperpriors, over ``log gamma`` with gamma = (tightness[, sum_coef][,
initial]). Lag orders are compared on a common sample (the first ``max_lags`` rows are
presample for every order).

When only the tightness is tuned, :class:`TightnessProfile` evaluates the marginal
likelihood in O(k n^2 + n^3) per value after one eigendecomposition: the deterministic
block is partialled out (its prior variance does not change with the tightness) and the
remaining lag block of the posterior precision is ``D^-1/2 (W + I/lambda^2) D^-1/2``
with a fixed W = Q diag(e) Q'.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import minimize, minimize_scalar
from scipy.special import gammaln

from ._kernels import tightness_profile
from ._types import FloatArray
from .conjugate import (
    Moments,
    log_marginal_likelihood,
    log_marginal_likelihood_fast,
    log_multigamma,
)
from .data import Design
from .errors import ConvergenceWarning, NotPositiveDefiniteError
from .shrinkage import (
    MinnesotaHyper,
    ar_residual_variances,
    det_variances,
    lag_variance_profile,
    minnesota_prior,
)

__all__ = [
    "BOUNDS",
    "TightnessProfile",
    "TuningResult",
    "gamma_from_mode_sd",
    "log_hyperprior",
    "tune_hyperparameters",
]

#: search ranges (inclusive) of each tuned hyperparameter
BOUNDS = {"tightness": (1e-4, 5.0), "sum_coef": (1e-3, 1e3), "initial": (1e-3, 1e3)}
#: (mode, s.d.) of the Gamma hyperpriors of Giannone, Lenza & Primiceri (2015)
HYPERPRIOR_MODE_SD = {"tightness": (0.2, 0.4), "sum_coef": (1.0, 1.0), "initial": (1.0, 1.0)}


def gamma_from_mode_sd(mode: float, sd: float) -> tuple[float, float]:
    """Shape and scale of the Gamma distribution with this mode and s.d.

    The shape a solves a / (a - 1)^2 = (sd / mode)^2 (a > 1); scale = mode / (a - 1).
    """
    r = (sd / mode) ** 2
    # a/(a-1)^2 = r  <=>  r a^2 - (2r + 1) a + r = 0, larger root
    a = ((2 * r + 1) + math.sqrt((2 * r + 1) ** 2 - 4 * r * r)) / (2 * r)
    return a, mode / (a - 1)


def log_hyperprior(name: str, value: float) -> float:
    """log Gamma density of one hyperparameter under GLP's hyperprior."""
    a, scale = gamma_from_mode_sd(*HYPERPRIOR_MODE_SD[name])
    return float((a - 1) * np.log(value) - value / scale - a * np.log(scale) - gammaln(a))


@dataclass(frozen=True)
class TuningResult:
    """Chosen hyperparameters and the value of the objective there."""

    hyper: MinnesotaHyper
    log_ml: float
    objective: float
    tuned: tuple[str, ...]
    evaluations: int


class TightnessProfile:
    """log p(Y | tightness) for a fixed design, psi, decay and det_scale, no dummies.

    Cost: one eigendecomposition of size n*p at construction, O(k n^2 + n^3) per call.
    """

    def __init__(self, design: Design, hyper: MinnesotaHyper, prior_mean: FloatArray,
                 psi: FloatArray) -> None:
        m, n, T = design.n_det, design.n, design.nobs
        X, Y = design.X, design.Y
        Xd, Xl = X[:, :m], X[:, m:]
        omega_d = det_variances(design, hyper.det_scale)
        w = lag_variance_profile(design, psi, hyper.decay)
        B0l = np.zeros((n * design.lags, n))
        B0l[np.arange(n), np.arange(n)] = prior_mean
        # partial out the deterministic block: P_dd = Xd'Xd + diag(1/omega_d)
        P_dd = Xd.T @ Xd + np.diag(1.0 / omega_d)
        C = np.linalg.cholesky(P_dd) if m else np.zeros((0, 0))
        A_ld = Xl.T @ Xd
        r_d = Xd.T @ Y
        if m:
            Ci_Adl = np.linalg.solve(C, A_ld.T)  # C^-1 A_dl, (m, np)
            Ci_rd = np.linalg.solve(C, r_d)
            A_tilde = Xl.T @ Xl - Ci_Adl.T @ Ci_Adl
            g = Xl.T @ Y - Ci_Adl.T @ Ci_rd
            quad_d = Ci_rd.T @ Ci_rd
            logdet_Pdd = 2.0 * np.sum(np.log(np.diag(C)))
        else:
            A_tilde, g = Xl.T @ Xl, Xl.T @ Y
            quad_d, logdet_Pdd = np.zeros((n, n)), 0.0
        sw = np.sqrt(w)
        e, Qm = np.linalg.eigh(sw[:, None] * A_tilde * sw[None, :])
        self._e = np.ascontiguousarray(np.clip(e, 0.0, None))
        self._G1 = np.ascontiguousarray(Qm.T @ (sw[:, None] * g))
        self._G2 = np.ascontiguousarray(Qm.T @ (B0l / sw[:, None]))
        B0WB0 = (B0l / w[:, None]).T @ B0l
        self._B0WB0 = np.ascontiguousarray(0.5 * (B0WB0 + B0WB0.T))
        df0 = n + 2.0
        S0 = np.diag(psi * (df0 - n - 1))
        base = S0 + Y.T @ Y - quad_d
        self._base = np.ascontiguousarray(0.5 * (base + base.T))
        self._const = (
            -0.5 * n * T * np.log(np.pi)
            + log_multigamma(0.5 * (df0 + T), n)
            - log_multigamma(0.5 * df0, n)
            - 0.5 * n * float(np.sum(np.log(omega_d)))
            # the lag rows of -n/2 log|Omega0| give -n/2 sum log w (and -n kl log lambda,
            # in the kernel); -n/2 log|P_ll| with log|P_ll| = -sum log w + sum log(e +
            # 1/lambda^2) gives +n/2 sum log w: the two cancel, so neither appears
            - 0.5 * n * logdet_Pdd
            + 0.5 * df0 * float(np.sum(np.log(np.diag(S0))))
        )
        self._df = df0 + T

    def __call__(self, tightness: float) -> float:
        return float(self.many(np.array([tightness], dtype=np.float64))[0])

    def many(self, tightness: FloatArray) -> FloatArray:
        """log p(Y | tightness) at each of the (L,) values, -inf where the posterior
        scale S is not positive definite (compiled: :func:`priors._kernels.tightness_profile`)."""
        lam = np.ascontiguousarray(tightness, dtype=np.float64).reshape(-1)
        return tightness_profile(lam, self._e, self._G1, self._G2, self._base, self._B0WB0,
                                 float(self._const), float(self._df))


def _objective_factory(
    design: Design, base: MinnesotaHyper, prior_mean: FloatArray, psi: FloatArray,
    names: tuple[str, ...], hyperprior: bool,
) -> tuple[Callable[[FloatArray], tuple[float, float]],
           Callable[[FloatArray], FloatArray] | None]:
    """Map log-hyperparameters to (objective, log_ml); and, for the tightness alone,
    a map of an (L,) grid of log-tightness values to the (L,) objectives at once."""
    profile = None
    moments = None  # cross-products only for the general (non-profile) path
    if names == ("tightness",) and base.sum_coef is None and base.initial is None:
        profile = TightnessProfile(design, base, prior_mean, psi)

    def evaluate(logs: FloatArray) -> tuple[float, float]:
        values = dict(zip(names, np.exp(logs).tolist(), strict=True))
        if profile is not None:
            lml = profile(values["tightness"])
        else:
            hyper = replace(base, **values)
            prior = minnesota_prior(design, hyper, prior_mean, psi)
            nonlocal moments
            if moments is None:
                moments = Moments.of(design)
            try:
                lml = log_marginal_likelihood_fast(moments, prior)
            except NotPositiveDefiniteError:
                # cross-product route lost too many digits (extreme weights): use QR
                try:
                    lml = log_marginal_likelihood(design, prior)
                except NotPositiveDefiniteError:
                    lml = -np.inf
        obj = lml
        if hyperprior:
            obj += sum(log_hyperprior(nm, v) for nm, v in values.items())
        return obj, lml

    if profile is None:
        return evaluate, None

    def evaluate_grid(logs: FloatArray) -> FloatArray:
        obj = profile.many(np.exp(logs))
        if hyperprior:
            obj = obj + np.array([log_hyperprior("tightness", v) for v in np.exp(logs)])
        return obj

    return evaluate, evaluate_grid


#: Newton on a batched objective: difference step, step tolerance and iteration cap
_NEWTON_DELTA, _NEWTON_XTOL, _NEWTON_MAXITER = 1e-3, 1e-7, 60
#: a Newton step shorter than this is taken as the last one (quadratic convergence)
_NEWTON_QUADRATIC = 1e-4


def _parabola_peak(grid: FloatArray, negatives: list[float], i: int) -> float:
    """Where the parabola through grid points i-1, i, i+1 of an (equally spaced) grid
    peaks, given the negated objective there; grid[i] itself at either end of the grid
    or when the three points are not convex (successive parabolic interpolation, Press
    et al., *Numerical Recipes*, 3rd ed., sec. 10.3)."""
    if not 0 < i < len(grid) - 1:
        return float(grid[i])
    f0, f1, f2 = negatives[i - 1], negatives[i], negatives[i + 1]
    curvature = f0 - 2 * f1 + f2
    if not (curvature > 0 and max(f0, f1, f2) < 1e300):
        return float(grid[i])
    step = grid[1] - grid[0]
    return float(grid[i] + 0.5 * step * (f0 - f2) / curvature)


def _newton_in_bracket(objective: Callable[[FloatArray], FloatArray], a: float, b: float,
                       x: float) -> tuple[float, int]:
    """Maximiser of a smooth ``objective`` in [a, b], starting at ``x``; and the number of
    points evaluated.

    Safeguarded Newton: each iteration evaluates x - d, x, x + d in one batched call
    (central differences for the slope and curvature), keeps [a, b] around the maximum by
    the sign of the slope, and falls back to bisection when the curvature is not negative
    or the step leaves the bracket (Press et al., *Numerical Recipes*, 3rd ed., sec. 9.4,
    "rtsafe"). The error of the differences, O(d^2), moves the maximiser by far less than
    the tolerance. A Newton step shorter than 1e-4 is the last: near the maximum the
    error after a step is about the square of its length times a constant of order one
    here (log tightness). Three points per iteration and about three iterations replace
    bounded Brent's dozen scalar calls.
    """
    d = _NEWTON_DELTA
    used = 0
    start = x  # finite there (the best grid point)
    for _ in range(_NEWTON_MAXITER):
        lo_v, mid, hi_v = objective(np.array([x - d, x, x + d])).tolist()
        used += 3
        if not (math.isfinite(lo_v) and math.isfinite(mid) and math.isfinite(hi_v)):
            if x > start:  # off the objective's domain: cut that side, bisect
                b = x
            elif x < start:
                a = x
            else:
                return x, used
            new = 0.5 * (a + b)
        else:
            slope = (hi_v - lo_v) / (2 * d)
            curv = (hi_v - 2 * mid + lo_v) / (d * d)
            if slope > 0:
                a = max(a, x)
            else:
                b = min(b, x)
            new = x - slope / curv if curv < 0 else math.nan
            if not (a < new < b):
                new = 0.5 * (a + b)
            elif abs(new - x) < _NEWTON_QUADRATIC:
                # a Newton step this short leaves an error of about its square
                return new, used
        if abs(new - x) < _NEWTON_XTOL or b - a < _NEWTON_XTOL:
            return min(max(new, a), b), used
        x = new
    return x, used


def tune_hyperparameters(
    design: Design,
    base: MinnesotaHyper,
    prior_mean: FloatArray,
    *,
    tune: tuple[str, ...] = ("tightness",),
    hyperprior: bool = False,
    psi: FloatArray | None = None,
) -> TuningResult:
    """Maximise the (log) marginal likelihood, or the hyperparameter posterior, over ``tune``.

    ``tune`` lists names among tightness, sum_coef and initial; a dummy weight can be
    tuned only if it is switched on in ``base`` (its value there is the start).
    """
    psi = ar_residual_variances(design) if psi is None else psi
    names = tuple(tune)
    evaluate, evaluate_grid = _objective_factory(design, base, prior_mean, psi, names,
                                                 hyperprior)
    lo = np.log([BOUNDS[nm][0] for nm in names])
    hi = np.log([BOUNDS[nm][1] for nm in names])
    count = 0

    def negative(logs: FloatArray) -> float:
        nonlocal count
        count += 1
        val = evaluate(np.atleast_1d(logs))[0]
        return -val if np.isfinite(val) else 1e300

    if len(names) == 1:
        # coarse grid, so a multimodal profile does not trap us, then a local search
        # (batched Newton, or bounded Brent) between the best point's neighbours
        grid = np.linspace(lo[0], hi[0], 15)  # neighbours 2.2x apart
        if evaluate_grid is not None:  # one batched evaluation of the whole grid
            count += grid.size
            found = evaluate_grid(grid)
            vals = np.where(np.isfinite(found), -found, 1e300).tolist()
        else:
            vals = [negative(np.array([g])) for g in grid]
        i = int(np.argmin(vals))
        a, b = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
        if evaluate_grid is not None:
            x, used = _newton_in_bracket(evaluate_grid, a, b, _parabola_peak(grid, vals, i))
            count += used
            best = np.array([x])
        else:
            res = minimize_scalar(negative, bounds=(a, b), method="bounded",
                                  options={"xatol": 1e-6})
            best = np.array([res.x])
    else:
        start = np.log([getattr(base, nm) for nm in names])
        start = np.clip(start, lo, hi)
        # finite-difference steps of 1e-5 in log space: far above rounding noise
        res = minimize(negative, start, method="L-BFGS-B", bounds=list(zip(lo, hi, strict=True)),
                       options={"eps": 1e-5})
        best = res.x
    # a dummy weight at its upper bound just means the data switch that prior off
    # np.isclose(best, edge, atol=1e-3), written out (a tenth of its cost)
    at_upper = (np.abs(best - hi) <= 1e-3 + 1e-5 * np.abs(hi)) & np.array(
        [nm == "tightness" for nm in names])
    at_bound = (np.abs(best - lo) <= 1e-3 + 1e-5 * np.abs(lo)) | at_upper
    if np.any(at_bound):
        which = ", ".join(nm for nm, b in zip(names, at_bound, strict=True) if b)
        warnings.warn(
            f"marginal likelihood is largest at the edge of the search range for {which}; "
            "the data barely inform it, consider fixing it",
            ConvergenceWarning,
            stacklevel=2,
        )
    obj, lml = evaluate(best)
    hyper = replace(base, **dict(zip(names, np.exp(best).tolist(), strict=True)))
    return TuningResult(hyper, lml, obj, names, count)
