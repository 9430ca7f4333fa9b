"""Linear prediction pools of two forecast densities: the weight that maximises the
pooled log score over a set of past forecasts.

Given log predictive densities a_t (model A) and b_t (model B) of the same R outcomes, the
pool ``w p_A + (1 - w) p_B`` has log score

    L(w) = sum_t log(w exp(a_t) + (1 - w) exp(b_t)),

which is concave in w on [0, 1] (Geweke & Amisano 2011, "Optimal prediction pools",
J. Econometrics 164). Its derivative at w = 1 is ``sum_t (1 - exp(b_t - a_t))``, so
A alone is optimal (w* = 1) exactly when ``sum_t exp(b_t - a_t) <= R``, and B alone
(w* = 0) when ``sum_t exp(a_t - b_t) <= R``.

``prior_weight`` kappa adds ``kappa log w`` (a Beta(kappa + 1, 1) prior on w, which
leans towards model A): with kappa = 0 the plain optimum. The maximiser of the concave
objective is found by bisection on its derivative to 1e-12.

Shapes: a, b (R,) log densities of the same outcomes.
"""

from __future__ import annotations

import numpy as np

from ._types import FloatArray
from .errors import SpecificationError

__all__ = ["pool_log_score", "pool_weight"]


def _check(a: FloatArray, b: FloatArray) -> tuple[FloatArray, FloatArray]:
    a, b = np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)
    if a.ndim != 1 or a.shape != b.shape or not a.size:
        raise SpecificationError(f"log scores must be two 1-D arrays of one non-zero "
                                 f"length; got shapes {a.shape} and {b.shape}")
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b))):
        raise SpecificationError("log scores must be finite")
    return a, b


def pool_log_score(a: FloatArray, b: FloatArray, w: float) -> float:
    """L(w): the log score of the pool ``w p_A + (1 - w) p_B`` (see the module notes)."""
    a, b = _check(a, b)
    with np.errstate(divide="ignore"):
        return float(np.sum(np.logaddexp(np.log(w) + a, np.log1p(-w) + b)))


def pool_weight(a: FloatArray, b: FloatArray, *, prior_weight: float = 0.0) -> float:
    """The weight w in [0, 1] on model A that maximises ``L(w) + kappa log w`` (kappa =
    ``prior_weight`` >= 0; module notes)."""
    a, b = _check(a, b)
    if prior_weight < 0:
        raise SpecificationError(f"prior_weight must be >= 0; got {prior_weight}")
    shift = np.maximum(a, b)
    pa, pb = np.exp(a - shift), np.exp(b - shift)  # each pair scaled alike: ratios kept

    def slope(w: float) -> float:
        with np.errstate(divide="ignore", invalid="ignore"):
            terms = (pa - pb) / (w * pa + (1.0 - w) * pb)  # +-inf where one density is 0
            return float(np.sum(terms)) + (prior_weight / w if prior_weight else 0.0)

    if slope(1.0) >= 0.0:
        return 1.0
    if prior_weight == 0.0 and slope(0.0) <= 0.0:
        return 0.0
    lo, hi = 0.0, 1.0  # slope(lo) > 0 > slope(hi); slope is decreasing (concavity)
    while hi - lo > 1e-12:
        mid = 0.5 * (lo + hi)
        if slope(mid) > 0.0:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)
