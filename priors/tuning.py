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

With several hyperparameters (or dummy observations) each value is the QR closed form
(:func:`priors.conjugate.log_marginal_likelihood`), maximised by L-BFGS-B, an active-set
polish and coarse escape scans (:func:`_maximise_in_box`). A tuned hyperparameter that
ends at a bound of :data:`BOUNDS` gives a :class:`ConvergenceWarning` naming it, the bound
and the value.
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
from .conjugate import log_marginal_likelihood, log_multigamma
from .data import Design
from .errors import ConvergenceWarning, NotPositiveDefiniteError
from .shrinkage import (
    MinnesotaHyper,
    ar_residual_variances,
    det_variances,
    lag_variance_profile,
    minnesota_prior,
    prior_mean_block,
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
BOUNDS = {"tightness": (1e-4, 5.0), "sum_coef": (1e-3, 1e3), "initial": (1e-3, 1e3),
          "season_scale": (1e-3, 1e2)}
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
    if name not in HYPERPRIOR_MODE_SD:  # the season scale: flat in its log
        return 0.0
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
        omega_d = det_variances(design, hyper.det_scale, hyper.season_scale)
        w = lag_variance_profile(design, psi, hyper.decay)
        B0l = prior_mean_block(prior_mean, n, design.lags)
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
    if names == ("tightness",) and base.sum_coef is None and base.initial is None:
        profile = TightnessProfile(design, base, prior_mean, psi)

    def evaluate(logs: FloatArray) -> tuple[float, float]:
        values = dict(zip(names, np.exp(logs).tolist(), strict=True))
        if profile is not None:
            lml = profile(values["tightness"])
        else:
            prior = minnesota_prior(design, replace(base, **values), prior_mean, psi)
            try:
                # The QR closed form, not the cross-product route: near the lower bounds
                # the dummy rows are ~1e3 times the data (log levels: ~6e3) and the
                # cross-product route's Woodbury log p(Y_d) cancels ~1e10-sized terms,
                # off by up to 50 nats on Lutkepohl's E1 (the QR form agrees with a
                # 60-digit evaluation to 3e-10). Its cost is at most ~2.5x, and a smooth
                # objective saves more than that in L-BFGS-B iterations.
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


#: L-BFGS-B on the log-hyperparameters. ``eps``: forward-difference step, far above the
#: objective's rounding (~1e-10 nats by the QR route) and small enough that its truncation
#: error moves the maximiser by ~eps/2. ``gtol``: scipy's default (a gradient of 1e-5 per
#: log-unit leaves ~1e-10 nats on the table).
_LBFGSB_OPTIONS = {"eps": 1e-5, "gtol": 1e-5}
#: L-BFGS-B stops when an iteration gains less than this many nats. scipy's ``ftol`` is
#: relative to |objective|; it is set from this and the objective at the start, so that a
#: log ML of 1e5 stops as close as one of 500 (the default, 2.2e-9, is 1e-6 nats at 500)
_FTOL_NATS = 1e-6
#: a bound is tried (that parameter pinned there, the others re-optimised) when moving the
#: parameter there with the others held costs at most this many nats (1/10 of a nat is
#: negligible evidence); a bound farther down than that is not the maximum of a smooth
#: objective that L-BFGS-B has just climbed, so it costs one evaluation and no search
_PIN_SCREEN = 0.1
#: interior grid points per parameter of the escape scan (neighbours 10x apart for the
#: dummy weights, 6x for the tightness) and the gain (nats) that restarts the search
_ESCAPE_POINTS, _ESCAPE_GAIN = 5, 1e-6
#: step inwards (log scale) from a pinned bound, to check that the interior is not better
_RELEASE_STEP = 1e-3
#: improvement (nats) that releases a pinned parameter: above the rounding of the objective
_RELEASE_GAIN = 1e-8


def _lbfgsb(negative: Callable[[FloatArray], float], start: FloatArray, lo: FloatArray,
            hi: FloatArray, pinned: FloatArray, ftol: float) -> tuple[FloatArray, float]:
    """Minimise ``negative`` in the box [lo, hi] by L-BFGS-B, holding the ``pinned``
    parameters (a boolean mask) at their start values; the minimiser and its value."""
    if np.all(pinned):  # nothing left to search
        return start.copy(), negative(start)
    bounds = [(s, s) if p else (a, b) for s, p, a, b in zip(start, pinned, lo, hi, strict=True)]
    res = minimize(negative, start, method="L-BFGS-B", bounds=bounds,
                   options={**_LBFGSB_OPTIONS, "ftol": ftol})
    return np.asarray(res.x, dtype=np.float64), float(res.fun)


def _bound_candidates(negative: Callable[[FloatArray], float], x: FloatArray, value: float,
                      lo: FloatArray, hi: FloatArray, skip: FloatArray
                      ) -> list[tuple[int, float]]:
    """Bounds worth pinning a parameter at, most promising first, as (index, bound).

    Both bounds of each parameter not in ``skip`` are evaluated with the others held at
    ``x`` (two evaluations each); a bound is a candidate when that costs at most
    ``_PIN_SCREEN`` nats. Why this is needed: a marginal likelihood approaches its limit
    as a dummy weight goes to 0 (or infinity) like the square of the weight (of its
    inverse), so in log scale it is flat near the bound, and L-BFGS-B stops, its gradient
    at the rounding level, a log-unit or more short of it (Lutkepohl's E1: sum_coef 2.8e-3
    for the bound 1e-3). The slope is too small there to say which bound to try.
    """
    found = []
    for i in np.flatnonzero(~skip):
        for edge in (lo[i], hi[i]):
            trial = x.copy()
            trial[i] = edge
            cost = negative(trial) - value
            if cost <= _PIN_SCREEN:
                found.append((cost, int(i), float(edge)))
    return [(i, edge) for _, i, edge in sorted(found)]


def _first_release(negative: Callable[[FloatArray], float], x: FloatArray, value: float,
                   lo: FloatArray, pinned: FloatArray) -> tuple[int, FloatArray] | None:
    """The first pinned parameter whose one-sided slope says the interior is better, as
    (index, start just inside its bound), or None: the Karush-Kuhn-Tucker sign condition,
    checked by one evaluation ``_RELEASE_STEP`` inside each bound."""
    for i in np.flatnonzero(pinned):
        inside = x.copy()
        inside[i] += _RELEASE_STEP if x[i] <= lo[i] else -_RELEASE_STEP
        if negative(inside) < value - _RELEASE_GAIN:
            return int(i), inside
    return None


def _climb_and_polish(negative: Callable[[FloatArray], float], start: FloatArray,
                      lo: FloatArray, hi: FloatArray, ftol: float) -> tuple[FloatArray, float]:
    """L-BFGS-B from ``start``, then the active-set polish; the minimiser and its value.

    Polish: a parameter with a bound within ``_PIN_SCREEN`` nats is pinned there and the
    others are re-optimised, kept if that is no worse; a pinned parameter (by L-BFGS-B or
    here) whose inward slope is better is released and the others re-optimised from just
    inside its bound. Each parameter is pinned and released at most once, so the polish
    ends. Cost: two evaluations per free parameter screened, one short L-BFGS-B on the
    rest (they start at their optimum) per pin tried, one evaluation per pinned parameter.
    """
    x, value = _lbfgsb(negative, start, lo, hi, np.zeros(lo.size, dtype=bool), ftol)
    pinned = (x <= lo) | (x >= hi)  # L-BFGS-B's own active set
    tried = pinned.copy()
    while True:
        moved = False
        for i, edge in _bound_candidates(negative, x, value, lo, hi, tried):
            if tried[i]:  # its other bound was kept already
                continue
            tried[i] = True
            trial, pins = x.copy(), pinned.copy()
            trial[i], pins[i] = edge, True
            x_new, value_new = _lbfgsb(negative, trial, lo, hi, pins, ftol)
            if value_new <= value:
                x, value, pinned, moved = x_new, value_new, pins, True
                break  # the others moved: screen them again from here
        if not moved:
            break
    released = np.zeros(lo.size, dtype=bool)
    while (found := _first_release(negative, x, value, lo, pinned & ~released)) is not None:
        i, inside = found
        released[i] = True
        pins = pinned.copy()
        pins[i] = False
        x_new, value_new = _lbfgsb(negative, inside, lo, hi, pins, ftol)
        if value_new < value:
            x, value, pinned = x_new, value_new, pins
    return x, value


def _escape_point(negative: Callable[[FloatArray], float], x: FloatArray, value: float,
                  lo: FloatArray, hi: FloatArray) -> FloatArray | None:
    """The best point of coarse grids through ``x`` along each parameter (the others
    held), if it beats ``value`` by ``_ESCAPE_GAIN``; else None.

    Why: with dummy weights the objective can have several local maxima, typically one
    with a weight near or below 1 (that prior on) and one with it large (nearly off),
    and L-BFGS-B climbs whichever its start leads to: the same reason as the
    one-parameter path's coarse grid. ``_ESCAPE_POINTS`` interior points per parameter
    (the polish has tried the bounds).
    """
    best, best_value = None, value - _ESCAPE_GAIN
    for i in range(lo.size):
        for g in np.linspace(lo[i], hi[i], _ESCAPE_POINTS + 2)[1:-1]:
            trial = x.copy()
            trial[i] = g
            v = negative(trial)
            if v < best_value:
                best, best_value = trial, v
    return best


def _maximise_in_box(negative: Callable[[FloatArray], float], start: FloatArray,
                     lo: FloatArray, hi: FloatArray) -> FloatArray:
    """Minimiser of ``negative`` (smooth, in log scale) in the box [lo, hi].

    :func:`_climb_and_polish` from ``start``, then escape scans (:func:`_escape_point`):
    from a better grid point the climb is rerun, at most once per parameter, so the cost
    stays bounded (a scan that finds nothing costs 5 evaluations per parameter).
    """
    ftol = max(_FTOL_NATS / max(abs(negative(start)), 1.0), 1e-15)
    x, value = _climb_and_polish(negative, start, lo, hi, ftol)
    for _ in range(lo.size):
        escape = _escape_point(negative, x, value, lo, hi)
        if escape is None:
            break
        x_new, value_new = _climb_and_polish(negative, escape, lo, hi, ftol)
        if not value_new < value:
            break
        x, value = x_new, value_new
    return x


def _at_edges(best: FloatArray, lo: FloatArray, hi: FloatArray
              ) -> tuple[FloatArray, FloatArray]:
    """Boolean masks of the log-hyperparameters at the lower and at the upper bound:
    np.isclose(best, edge, atol=1e-3) written out (a tenth of its cost)."""
    at_lower = np.abs(best - lo) <= 1e-3 + 1e-5 * np.abs(lo)
    at_upper = np.abs(best - hi) <= 1e-3 + 1e-5 * np.abs(hi)
    return at_lower, at_upper


#: what a hyperparameter at a bound of its search range means, and what to do about it
_EDGE_ADVICE = {
    ("tightness", "lower"): "the data ask for the lag coefficients to be held at the prior "
                            "mean; check the prior mean, or fix tightness",
    ("tightness", "upper"): "the data barely restrain the lag coefficients (close to least "
                            "squares); consider fewer lags, or fix tightness",
    ("sum_coef", "lower"): "the data ask for the sum-of-coefficients prior (each series a "
                           "unit root, no long-run relations) to be imposed almost exactly; "
                           "consider fixing sum_coef at a small value",
    ("sum_coef", "upper"): "the data switch the sum-of-coefficients prior off; consider "
                           "fixing sum_coef or switching it off (sum_coef=None)",
    ("initial", "lower"): "the data ask for the dummy-initial-observation prior (series at "
                          "their presample means, or one common stochastic trend) to be "
                          "imposed almost exactly; consider fixing initial at a small value",
    ("initial", "upper"): "the data switch the dummy-initial-observation prior off; consider "
                          "fixing initial or switching it off (initial=None)",
    ("season_scale", "lower"): "the data ask for the seasonal-dummy coefficients to be held "
                               "at zero; consider no seasonal dummies (seasonal=False)",
    ("season_scale", "upper"): "the data barely restrain the seasonal-dummy coefficients; "
                               "consider fixing season_scale",
}
#: advice for a name without its own entry above
_EDGE_ADVICE_OTHER = "the data barely inform it; consider fixing it"


def _edge_messages(names: tuple[str, ...], best: FloatArray, lo: FloatArray, hi: FloatArray,
                   hyperprior: bool) -> list[str]:
    """One warning text per tuned hyperparameter that ends at a bound of its search range,
    naming it, the bound and the value, with advice."""
    at_lower, at_upper = _at_edges(best, lo, hi)
    what = "the hyperparameter posterior" if hyperprior else "the marginal likelihood"
    messages = []
    for name, value, low, high in zip(names, np.exp(best), at_lower, at_upper, strict=True):
        if not (low or high):
            continue
        side = "lower" if low else "upper"
        edge = BOUNDS[name][0 if low else 1]
        messages.append(
            f"{what} is largest at the edge of the search range for {name}: {value:.6g} is "
            f"its {side} bound {edge:g} (range {BOUNDS[name][0]:g} to {BOUNDS[name][1]:g}); "
            f"{_EDGE_ADVICE.get((name, side), _EDGE_ADVICE_OTHER)}")
    return messages


def tune_hyperparameters(
    design: Design,
    base: MinnesotaHyper,
    prior_mean: FloatArray,
    *,
    tune: tuple[str, ...] = ("tightness",),
    hyperprior: bool = False,
    psi: FloatArray | None = None,
    warn: bool = True,
) -> TuningResult:
    """Maximise the (log) marginal likelihood, or the hyperparameter posterior, over ``tune``.

    ``tune`` lists names among tightness, sum_coef and initial; a dummy weight can be
    tuned only if it is switched on in ``base`` (its value there is the start).
    ``warn=False`` skips the :class:`ConvergenceWarning` for a result at a search bound
    (for callers that judge bounds themselves; no process-wide warning filter needed).
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
        start = np.clip(np.log([getattr(base, nm) for nm in names]), lo, hi)
        best = _maximise_in_box(negative, start, lo, hi)
    for message in _edge_messages(names, best, lo, hi, hyperprior) if warn else ():
        warnings.warn(message, ConvergenceWarning, stacklevel=2)
    obj, lml = evaluate(best)
    hyper = replace(base, **dict(zip(names, np.exp(best).tolist(), strict=True)))
    return TuningResult(hyper, lml, obj, names, count)
