"""Per-series local level with a damped trend and additive seasonality: the innovations
state-space form of damped-trend exponential smoothing.

Model (additive errors, damped additive trend, additive season of period m; Gardner &
McKenzie 1985 for the damped trend, in the single-source-of-error form of Hyndman,
Koehler, Ord & Snyder 2008, "Forecasting with Exponential Smoothing", ch. 2, their
ETS(A,Ad,A)), for one series y_1..y_T::

    e_t = y_t - (l_{t-1} + phi b_{t-1} + s_{t-m}),   e_t ~ N(0, sigma^2) i.i.d.
    l_t = l_{t-1} + phi b_{t-1} + alpha e_t
    b_t = phi b_{t-1} + beta e_t
    s_t = s_{t-m} + gamma e_t

with 0 < alpha < 1, 0 < beta < alpha, 0 < gamma < 1 - alpha and phi in [0.8, 0.98] (the
range Hyndman et al. recommend so that the trend neither explodes nor dies at once; a
common-practice bound, not derived here). Without a season (m = 0) the s terms are 0.

The h-step forecast is normal with mean ``l_T + phi_h b_T + s_{T+h-m(k+1)}``,
``phi_h = phi + ... + phi^h``, k = (h - 1) // m, and variance
``sigma^2 (1 + sum_{j=1}^{h-1} c_j^2)``, ``c_j = alpha + beta phi_j + gamma [j mod m = 0]``
(Hyndman et al. 2008, Table 6.1, class 1).

Fitting: the initial states come from the first two seasons (or the first two rows
without a season), a simplified form of the heuristic of Hyndman et al. 2008, section
2.6.1 (see :func:`initial_states`), and the errors of those rows are left out; the smoothing
weights and damping maximise the Gaussian likelihood with sigma^2 concentrated out, that
is minimise the sum of squared one-step errors after the first season(s) used to start.

Shapes: y (T,) one series; states (level, trend, season (m,)); paths (S, h).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize
from scipy.special import expit, logit

from ._kernels import damped_trend_errors
from ._types import FloatArray
from .errors import SpecificationError

__all__ = ["LocalTrendFit", "fit_local_trend", "forecast_moments", "initial_states",
           "one_step_errors", "simulate_local_trend"]

#: damping range (Hyndman et al. 2008's recommendation; common practice)
PHI_BOUNDS = (0.8, 0.98)


@dataclass(frozen=True)
class LocalTrendFit:
    """A fitted series: smoothing weights, damping, period, the states after the last row
    (``season[i]`` is the seasonal state for the period ``T + 1 + i`` modulo m), and the
    innovation standard deviation."""

    alpha: float
    beta: float
    gamma: float
    phi: float
    period: int
    level: float
    trend: float
    season: FloatArray
    sigma: float
    nobs: int


def _check(y: FloatArray, period: int) -> FloatArray:
    y = np.asarray(y, dtype=np.float64)
    if y.ndim != 1:
        raise SpecificationError(f"a local-trend series must be 1-D; got shape {y.shape}")
    if period < 0 or period == 1:
        raise SpecificationError(f"period must be 0 (no season) or >= 2; got {period}")
    need = 2 * period if period else 4
    if y.size < need + 2:
        raise SpecificationError(f"a local-trend series of period {period} needs at least "
                                 f"{need + 2} rows; got {y.size}")
    if not np.all(np.isfinite(y)):
        raise SpecificationError("a local-trend series must be finite")
    return y


def initial_states(y: FloatArray, period: int) -> tuple[float, float, FloatArray]:
    """Level, trend and seasonal states (m,) to start the recursion at the first row, from
    the first two seasons: level the first season's mean, trend the change between the two
    seasons' means per period, ``season[i]`` (used for row i) the first season's
    deviations from its mean. Without a season: the first value and the first change.
    Rough on purpose: the fit leaves out the errors of the rows they come from."""
    y = np.asarray(y, dtype=np.float64)
    if period:
        first, second = y[:period].mean(), y[period:2 * period].mean()
        return float(first), float((second - first) / period), y[:period] - first
    return float(y[0]), float(y[1] - y[0]), np.zeros(0)


def _burn(period: int) -> int:
    """Rows whose errors the fit leaves out: the rows that set the initial states."""
    return 2 * period if period else 2


def one_step_errors(y: FloatArray, period: int, alpha: float, beta: float, gamma: float,
                    phi: float, start: tuple[float, float, FloatArray] | None = None
                    ) -> tuple[FloatArray, tuple[float, float, FloatArray]]:
    """One-step errors e (T,) and the states after the last row (level, trend, season with
    ``season[i]`` for period T + 1 + i), from ``start`` (default :func:`initial_states`)."""
    y = np.asarray(y, dtype=np.float64)
    level, trend, season = start if start is not None else initial_states(y, period)
    state = np.array([level, trend], dtype=np.float64)
    s = np.array(season, dtype=np.float64) if period else np.zeros(1)
    err = np.empty(y.size)
    damped_trend_errors(y, period, alpha, beta, gamma, phi, state, s, err)
    s = np.roll(s, -(y.size % period)) if period else np.zeros(0)  # index 0: row T's season
    return err, (float(state[0]), float(state[1]), s)


def _unpack(z: FloatArray, period: int) -> tuple[float, float, float, float]:
    """Unconstrained z (4,) to (alpha, beta, gamma, phi) inside the bounds."""
    alpha = expit(z[0])
    beta = alpha * expit(z[1])
    gamma = (1.0 - alpha) * expit(z[2]) if period else 0.0
    lo, hi = PHI_BOUNDS
    phi = lo + (hi - lo) * expit(z[3])
    return float(alpha), float(beta), float(gamma), float(phi)


def _pack(fit: LocalTrendFit) -> FloatArray:
    """The unconstrained point of a fit's weights (inverse of :func:`_unpack`)."""
    lo, hi = PHI_BOUNDS
    alpha = min(max(fit.alpha, 1e-12), 1 - 1e-12)  # expit may round to 0 or 1
    share = np.array([alpha, fit.beta / alpha,
                      fit.gamma / (1 - alpha) if fit.period else expit(-2.0),
                      (fit.phi - lo) / (hi - lo)])
    return logit(np.clip(share, 1e-9, 1 - 1e-9))


def fit_local_trend(y: FloatArray, period: int = 0, *,
                    warm: LocalTrendFit | None = None) -> LocalTrendFit:
    """Fit one series (see the module notes): least squares of the one-step errors after
    the start-up rows, two Nelder-Mead starts, sigma the root mean squared error. With
    ``warm`` (a fit to nearly the same rows), one start at its weights instead: a
    rolling-origin check refits many overlapping samples this way.

    Raises :class:`~priors.errors.SpecificationError` for a series too short for its
    period, not 1-D or not finite.
    """
    y = _check(y, period)
    start = initial_states(y, period)

    state0 = np.array(start[:2], dtype=np.float64)
    season0 = np.array(start[2], dtype=np.float64) if period else np.zeros(1)
    state, season, err = np.empty(2), np.empty(season0.size), np.empty(y.size)

    def sse(z: FloatArray) -> float:  # the kernel sums the squares after the start-up rows
        state[:], season[:] = state0, season0
        return float(damped_trend_errors(y, period, *_unpack(z, period), state, season, err))

    best = None
    starts = ((0.0, -2.0, -2.0, 0.0), (-1.5, -2.0, -1.0, 1.0)) if warm is None else (_pack(warm),)
    for z0 in starts:
        res = minimize(sse, np.array(z0), method="Nelder-Mead",
                       options={"maxiter": 400, "xatol": 1e-4, "fatol": 1e-8})
        if best is None or res.fun < best.fun:
            best = res
    assert best is not None
    alpha, beta, gamma, phi = _unpack(best.x, period)
    err, (level, trend, season) = one_step_errors(y, period, alpha, beta, gamma, phi,
                                                  start=start)
    sigma = float(np.sqrt(np.mean(err[_burn(period):] ** 2)))
    return LocalTrendFit(alpha, beta, gamma, phi, period, level, trend, season, sigma,
                         int(y.size))


def _damped_sums(phi: float, horizon: int) -> FloatArray:
    """phi_h = phi + ... + phi^h for h = 1..horizon (horizon,)."""
    return np.cumsum(phi ** np.arange(1, horizon + 1))


def forecast_moments(fit: LocalTrendFit, horizon: int) -> tuple[FloatArray, FloatArray]:
    """Mean and variance (horizon,) of the h-step forecasts (Hyndman et al. 2008,
    Table 6.1, class 1)."""
    sums = _damped_sums(fit.phi, horizon)
    steps = np.arange(1, horizon + 1)
    seas = fit.season[(steps - 1) % fit.period] if fit.period else 0.0
    mean = fit.level + sums * fit.trend + seas
    j = steps[:-1]
    c = fit.alpha + fit.beta * sums[:-1]
    if fit.period:
        c = c + fit.gamma * (j % fit.period == 0)
    var = fit.sigma**2 * (1.0 + np.concatenate([[0.0], np.cumsum(c**2)]))
    return mean, var


def simulate_local_trend(rng: np.random.Generator, fit: LocalTrendFit, horizon: int,
                         size: int) -> FloatArray:
    """Sample paths (size, horizon) by running the state equations forward with normal
    innovations of s.d. sigma."""
    m = fit.period
    level = np.full(size, fit.level)
    trend = np.full(size, fit.trend)
    season = np.tile(fit.season if m else np.zeros(1), (size, 1))
    out = np.empty((size, horizon))
    for j in range(horizon):
        idx = j % m if m else 0
        seas = season[:, idx] if m else 0.0
        e = fit.sigma * rng.standard_normal(size)
        out[:, j] = level + fit.phi * trend + seas + e
        level, trend = level + fit.phi * trend + fit.alpha * e, fit.phi * trend + fit.beta * e
        if m:
            season[:, idx] = seas + fit.gamma * e
    return out
