"""Conditional forecasts ("what if" scenarios) from the joint posterior predictive.

Given parameters theta_s = (B_s, Sigma_s = M_s M_s'), the stacked future path is linear in
the standardised shocks u (h*n i.i.d. N(0, 1)):

    y_{T+t} = yhat_{T+t} + sum_{s<=t} Phi_{t-s} M u_s,      Phi_0 = I,

so every condition a planner states on a *level* in the user's units is a linear
restriction ``g'u`` on u in model units: a value of a series kept in levels, logs or
log1p fixes one cell of y; a value of a differenced series fixes a sum of cells (its
level is the last observation plus the cumulated differences).

- **Hard conditions** (a sales plan, a known promotion) fix ``R u = r``. Conditional on
  theta, ``u = z + R'(RR')^-1 (r - R z)`` with z ~ N(0, I) is an exact draw of u given
  the conditions (Waggoner & Zha 1999; it is ordinary Gaussian conditioning of the path).
- **Soft conditions** keep ``lower <= y <= upper`` at some cells. The restricted values
  w = R u are Gaussian given theta and the hard conditions, truncated to a box; they are
  drawn by Gibbs sampling in whitened coordinates (Rodriguez-Yam, Davis & Scharf 2004;
  from memory, see DEVELOPERS.md), started inside the box, so no draw is discarded. Then
  u given w as for hard conditions.

Parameter uncertainty: theta is drawn from the unconditional posterior, then the path
given theta and the conditions (Waggoner & Zha's mode without updating theta on the
conditioned path). Conditions that are far in the tails move the path but not the
parameters; :class:`ScenarioDraws` reports how likely each condition was beforehand so
users see when a scenario is implausible.

Shapes: B (S, k, n), M (S, n, n) lower-triangular roots of Sigma, history (p, n) oldest
row first, exog_rows (h, m); paths (S, h, n) in model units.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special

from ._types import FloatArray
from .cancellation import checkpoint
from .errors import SpecificationError
from .forecast import Forecast
from .irf import ma_coefficients
from .predictive import recursion_with_shocks
from .transforms import DIFFERENCING

__all__ = [
    "Condition",
    "ConditionSet",
    "Scenario",
    "ScenarioDraws",
    "conditional_paths",
    "conditions_from_table",
    "model_unit_conditions",
    "restricted_values",
    "restriction_matrix",
]

#: Gibbs sweeps per parameter draw for soft conditions (each sweep updates every
#: restricted value once); see DEVELOPERS.md for the mixing check behind the default.
DEFAULT_SWEEPS = 25


@dataclass(frozen=True)
class Condition:
    """One condition in the user's units: ``lower <= level of series at step <= upper``.

    ``series`` is a 0-based index, ``step`` is 1-based (1 = the first forecast period).
    A hard condition has ``lower == upper``; use +-inf for a one-sided range.
    """

    series: int
    step: int
    lower: float
    upper: float

    @property
    def hard(self) -> bool:
        return self.lower == self.upper


@dataclass(frozen=True)
class ConditionSet:
    """Conditions as linear restrictions on the model-unit path.

    ``series``, ``step`` (q,) ints (step 1-based); ``cumulative`` (q,) bool: the restricted
    quantity is sum_{t<=step} y_t[series] (differenced series) instead of y_step[series];
    ``lower``, ``upper`` (q,) in model units; hard rows have lower == upper.
    """

    series: np.ndarray
    step: np.ndarray
    cumulative: np.ndarray
    lower: FloatArray
    upper: FloatArray

    @property
    def size(self) -> int:
        return int(self.series.size)

    @property
    def hard(self) -> np.ndarray:
        return self.lower == self.upper


def _to_model_units(value: float, transform: str, last: float, bound: str) -> float:
    """Map a level in the user's units to the restricted model-unit quantity.

    ``bound`` is "lower", "upper" or "value"; a lower bound below the transform's domain
    means "no bound" (every level satisfies it), anything else there is infeasible.
    """
    if np.isinf(value):
        return value
    if transform == "none":
        return value
    if transform == "diff":
        return value - last
    floor = -1.0 if transform == "log1p" else 0.0
    if value <= floor:
        if bound == "lower":
            return -np.inf
        raise SpecificationError(
            f"a {transform!r} series cannot reach {value:g}: its values stay above "
            f"{floor:g}; give a {'range' if bound == 'upper' else 'value'} above that")
    if transform == "log1p":
        return float(np.log1p(value))
    if transform == "log":
        return float(np.log(value))
    return float(np.log(value) - np.log(last))  # logdiff


def model_unit_conditions(
    conditions: Sequence[Condition],
    transforms: Sequence[str],
    last_levels: FloatArray,
    horizon: int,
    names: Sequence[str] | None = None,
) -> ConditionSet:
    """Validate conditions in the user's units and turn them into model-unit rows.

    Raises SpecificationError for an unknown series, a step outside 1..horizon, a
    reversed range, two conditions on the same cell, or a level the transform cannot
    reach (e.g. a negative value of a log series).
    """
    n = len(transforms)
    names = list(names) if names is not None else [f"y{j + 1}" for j in range(n)]
    seen: set[tuple[int, int]] = set()
    rows = []
    for c in conditions:
        if not 0 <= c.series < n:
            raise SpecificationError(f"condition on unknown series index {c.series}; "
                                     f"there are {n} series")
        label = f"{names[c.series]!r} at step {c.step}"
        if int(c.step) != c.step or not 1 <= c.step <= horizon:
            raise SpecificationError(f"condition on {names[c.series]!r} at step {c.step} is "
                                     f"outside the forecast horizon 1..{horizon}")
        if np.isnan(c.lower) or np.isnan(c.upper):
            raise SpecificationError(f"condition on {label} has a missing bound")
        if c.lower > c.upper:
            raise SpecificationError(f"condition on {label} has lower {c.lower:g} above upper "
                                     f"{c.upper:g}; swap them")
        if c.hard and np.isinf(c.lower):
            raise SpecificationError(f"condition on {label} fixes an infinite value")
        if np.isinf(c.lower) and np.isinf(c.upper):
            continue  # (-inf, inf) restricts nothing
        if (c.series, c.step) in seen:
            raise SpecificationError(f"two conditions on {label}; give one value or range "
                                     "per series and step")
        seen.add((c.series, c.step))
        t, last = transforms[c.series], float(last_levels[c.series])
        if c.hard:
            lo = hi = _to_model_units(c.lower, t, last, "value")
        else:
            lo = _to_model_units(c.lower, t, last, "lower")
            hi = _to_model_units(c.upper, t, last, "upper")
        rows.append((c.series, int(c.step), t in DIFFERENCING, lo, hi))
    if not rows:
        empty = np.empty(0)
        return ConditionSet(empty.astype(int), empty.astype(int), empty.astype(bool),
                            empty, empty)
    s, st, cu, lo, hi = zip(*rows, strict=True)
    return ConditionSet(np.array(s), np.array(st), np.array(cu, dtype=bool),
                        np.array(lo, dtype=np.float64), np.array(hi, dtype=np.float64))


@dataclass(frozen=True)
class ScenarioDraws:
    """Conditional and baseline paths from the same parameter draws.

    conditional, baseline : (S, h, n) paths in model units; the baseline is the
        unconditional forecast (the same theta_s and the same z).
    prior_probability : (q,) for a range, the predictive probability (before
        conditioning) that the condition holds; for a fixed value, the predictive
        probability of a level at or below it (its percentile: near 0 or 1 means the
        scenario is far from what the model expects). Rao-Blackwellised: averages of
        normal probabilities over theta.
    soft_probability : share of draws meeting all ranges at once given the fixed values
        (1.0 when there are no ranges): how binding the ranges were jointly.
    sweeps : Gibbs sweeps used per draw for the ranges (0 without ranges).
    """

    conditional: FloatArray
    baseline: FloatArray
    prior_probability: FloatArray
    soft_probability: float
    sweeps: int


def restriction_matrix(B: FloatArray, M: FloatArray, n_det: int, lags: int,
                        horizon: int, conds: ConditionSet) -> FloatArray:
    """R (S, q, h*n): the restricted quantities' loadings on the standardised shocks.

    Row (j, t): e_j' Phi_{t-s} M at shock step s <= t, or e_j' (sum_{d<=t-s} Phi_d) M for a
    cumulative row; gathered from the MA coefficients, no products over the path.
    """
    S, n = B.shape[0], B.shape[2]
    Phi = ma_coefficients(B, n_det, lags, horizon - 1)  # (S, h, n, n)
    PhiM = np.matmul(Phi, M[:, None])
    cumPhiM = np.cumsum(PhiM, axis=1)
    R = np.zeros((S, conds.size, horizon, n))
    for q in range(conds.size):
        j, t = conds.series[q], conds.step[q]
        src = cumPhiM if conds.cumulative[q] else PhiM
        # shock step s (1..t) loads with lag t - s: reversed slice of the first t lags
        R[:, q, :t, :] = src[:, t - 1 :: -1, j, :]
    return R.reshape(S, conds.size, horizon * n)


def restricted_values(paths: FloatArray, conds: ConditionSet) -> FloatArray:
    """The restricted quantities evaluated on paths (S, h, n): (S, q)."""
    cum = np.cumsum(paths, axis=1)
    src = np.where(conds.cumulative[None, :], cum[:, conds.step - 1, conds.series],
                   paths[:, conds.step - 1, conds.series])
    return src


def _truncated_standard_normal(rng: np.random.Generator, a: FloatArray, b: FloatArray
                               ) -> FloatArray:
    """One N(0, 1) draw truncated to [a, b] per element (inverse CDF on the far tail's
    side, so the computation stays accurate far out in either tail)."""
    flip = a > 0  # work in the left tail, where ndtr keeps its relative accuracy
    lo = np.where(flip, -b, a)
    hi = np.where(flip, -a, b)
    plo, phi = special.ndtr(lo), special.ndtr(hi)
    u = rng.random(a.shape)
    x = special.ndtri(plo + u * (phi - plo))
    # ndtri can round to the interval's edge (or beyond) when both CDF values are tiny
    x = np.clip(x, lo, hi)
    return np.where(flip, -x, x)


def _gibbs_box(rng: np.random.Generator, mean: FloatArray, cov: FloatArray,
               lower: FloatArray, upper: FloatArray, start: FloatArray, sweeps: int
               ) -> FloatArray:
    """Draw w ~ N(mean, cov) truncated to lower <= w <= upper, per draw; (S, q).

    Gibbs sampling on v with w = mean + L v, L = chol(cov): the target of v is a
    standard normal restricted to a polytope, and each coordinate's full conditional is
    a univariate truncated N(0, 1) whose limits come from all q box constraints
    (Rodriguez-Yam, Davis & Scharf 2004). ``start`` must lie in the box.
    """
    L = np.linalg.cholesky(cov)  # (S, q, q)
    v = np.linalg.solve(L, (start - mean)[..., None])[..., 0]
    w = start.copy()
    q = mean.shape[1]
    for _ in range(sweeps):
        checkpoint()
        for i in range(q):
            col = L[:, :, i]  # (S, q): w moves along this column when v_i moves
            rest = w - col * v[:, i : i + 1]
            with np.errstate(divide="ignore", invalid="ignore"):
                t1 = (lower - rest) / col
                t2 = (upper - rest) / col
            active = np.abs(col) > 1e-12 * np.abs(L).max(axis=(1, 2))[:, None]
            lo_i = np.where(active, np.minimum(t1, t2), -np.inf).max(axis=1)
            hi_i = np.where(active, np.maximum(t1, t2), np.inf).min(axis=1)
            hi_i = np.maximum(hi_i, lo_i)  # rounding can cross the limits by an ulp
            new = _truncated_standard_normal(rng, lo_i, hi_i)
            w = rest + col * new[:, None]
            v[:, i] = new
    return w


def _normal_probability(mean: FloatArray, sd: FloatArray, lower: FloatArray,
                        upper: FloatArray, hard: np.ndarray) -> FloatArray:
    """Mean over draws of P(lower <= N(mean, sd^2) <= upper), or of P(X <= value) for
    fixed values; (q,)."""
    zl = (lower - mean) / sd
    zu = (upper - mean) / sd
    inside = special.ndtr(zu) - special.ndtr(zl)
    below = special.ndtr(zu)
    return np.where(hard, below, inside).mean(axis=0)


def conditional_paths(
    rng: np.random.Generator,
    B: FloatArray,
    M: FloatArray,
    history: FloatArray,
    exog_rows: FloatArray,
    conds: ConditionSet,
    *,
    n_det: int,
    sweeps: int = DEFAULT_SWEEPS,
) -> ScenarioDraws:
    """Paths drawn from the predictive distribution given the conditions.

    Parameters
    ----------
    rng : random generator.
    B : (S, k, n) coefficient draws; M : (S, n, n) roots of their Sigma draws.
    history : (p, n) last p observations in model units, oldest first.
    exog_rows : (h, m) deterministic/exogenous rows for the h steps.
    conds : restrictions from :func:`model_unit_conditions`.
    n_det : m, the number of deterministic/exogenous columns of B.
    sweeps : Gibbs sweeps per draw for ranges (ignored without ranges).
    """
    S, _, n = B.shape
    h, p = exog_rows.shape[0], history.shape[0]
    if int(sweeps) != sweeps or sweeps < 1:
        raise SpecificationError(f"sweeps must be an integer >= 1; got {sweeps!r}")
    z = rng.standard_normal((S, h, n))
    baseline = recursion_with_shocks(B, np.einsum("sij,shj->shi", M, z), history, exog_rows)
    if conds.size == 0:
        return ScenarioDraws(baseline, baseline, np.empty(0), 1.0, 0)
    R = restriction_matrix(B, M, n_det, p, h, conds)  # (S, q, hn)
    zf = z.reshape(S, h * n)
    Rz = np.einsum("sqk,sk->sq", R, zf)
    centre = restricted_values(baseline, conds) - Rz  # restricted values of the mean path
    omega = np.matmul(R, R.transpose(0, 2, 1))  # (S, q, q) = Cov(R u)
    sd = np.sqrt(np.diagonal(omega, axis1=1, axis2=2))
    lower, upper = conds.lower - centre, conds.upper - centre  # bounds on w = R u
    hard = conds.hard
    prob = _normal_probability(np.zeros_like(centre), sd, lower, upper, hard)
    w = np.where(hard, lower, Rz)
    soft = ~hard
    soft_prob, used = 1.0, 0
    if soft.any():
        hi, so = np.flatnonzero(hard), np.flatnonzero(soft)
        # w_soft | w_hard ~ N(mean_c, cov_c), then drawn inside its box
        oss = omega[:, so][:, :, so]
        if hi.size:
            ohh = omega[:, hi][:, :, hi]
            osh = omega[:, so][:, :, hi]
            gain = np.linalg.solve(ohh, osh.transpose(0, 2, 1)).transpose(0, 2, 1)
            mean_c = np.einsum("sij,sj->si", gain, lower[:, hi])
            cov_c = oss - np.matmul(gain, osh.transpose(0, 2, 1))
            # the untruncated draw given the hard values (same z, Gaussian conditioning)
            free = Rz[:, so] + np.einsum("sij,sj->si", gain, lower[:, hi] - Rz[:, hi])
        else:
            mean_c, cov_c, free = np.zeros((S, so.size)), oss, Rz[:, so]
        lo_s, hi_s = lower[:, so], upper[:, so]
        soft_prob = float(np.mean(np.all((free >= lo_s) & (free <= hi_s), axis=1)))
        start = np.clip(free, lo_s, hi_s)
        w[:, so] = _gibbs_box(rng, mean_c, cov_c, lo_s, hi_s, start, int(sweeps))
        used = int(sweeps)
    # u given R u = w: z + R'(R R')^-1 (w - R z), exact Gaussian conditioning
    adj = np.linalg.solve(omega, (w - Rz)[..., None])[..., 0]
    u = zf + np.einsum("sqk,sq->sk", R, adj)
    shocks = np.einsum("sij,shj->shi", M, u.reshape(S, h, n))
    conditional = recursion_with_shocks(B, shocks, history, exog_rows)
    return ScenarioDraws(conditional, baseline, prob, soft_prob, used)


def conditions_from_table(values: FloatArray) -> list[Condition]:
    """Hard conditions from an (h, n) table of levels with NaN where free (e.g. the
    known cells of a ragged edge)."""
    steps, series = np.nonzero(np.isfinite(values))
    return [Condition(int(j), int(t) + 1, float(values[t, j]), float(values[t, j]))
            for t, j in zip(steps, series, strict=True)]



@dataclass(frozen=True)
class Scenario:
    """A conditional forecast in the user's units.

    forecast : the paths given the conditions.  baseline : the unconditional paths from
    the same parameter draws (the difference is the scenario's effect).  conditions :
    the conditions used, the known cells of a ragged edge first (the first
    ``known_periods`` forecast periods are those incomplete data periods).
    prior_probability, soft_probability, sweeps : see :class:`ScenarioDraws`.
    """

    forecast: Forecast
    baseline: Forecast
    conditions: tuple[Condition, ...]
    prior_probability: FloatArray
    soft_probability: float
    sweeps: int
    known_periods: int = 0

    def table(self) -> pd.DataFrame:
        """One row per condition: series, date, step, kind (known, value or range),
        lower, upper and prior_probability."""
        steps = self.forecast.steps()
        kept = [c for c in self.conditions if not (np.isinf(c.lower) and np.isinf(c.upper))]
        n_known = sum(1 for c in kept if c.hard and c.step <= self.known_periods) if \
            self.known_periods else 0
        rows = []
        for i, (c, prob) in enumerate(zip(kept, self.prior_probability, strict=True)):
            kind = "known" if i < n_known else ("value" if c.hard else "range")
            rows.append({"series": self.forecast.names[c.series], "date": steps[c.step - 1],
                         "step": c.step, "kind": kind, "lower": c.lower, "upper": c.upper,
                         "prior_probability": float(prob)})
        return pd.DataFrame(rows, columns=["series", "date", "step", "kind", "lower", "upper",
                                           "prior_probability"])
