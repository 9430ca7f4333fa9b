"""Log predictive densities of realised outcomes, h = 1..H steps ahead, in the user's
units.

For each step h the joint outcome of all series is scored by the Rao-Blackwellised
mixture over parameter draws (methods brief sec. 9; not a kernel density estimate):

    p(y_{T+h}) ~= (1/S) sum_s N(w_h; mu_h(theta_s), V_h(theta_s)) |dw/dy|,

where w_h is the outcome in model units (the transformed value; for a differenced series
the change since the last observation, i.e. the sum of the h simulated differences),
mu_h the mean path given theta and V_h the covariance of the restricted quantities,
``R R'`` with R gathered from the MA coefficients as for scenarios (for series kept in
levels, V_h = sum_{i<h} Phi_i Sigma Phi_i', Lutkepohl 2005, sec. 2.2.2). The Jacobian
|dw/dy| is 1/y for log and logdiff, 1/(1+y) for log1p and 1 otherwise.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.special import logsumexp

from ._types import FloatArray
from .errors import SpecificationError
from .predictive import recursion_with_shocks
from .scenarios import ConditionSet, restricted_values, restriction_matrix
from .transforms import DIFFERENCING

__all__ = ["mixture_log_scores", "model_unit_outcomes"]


def model_unit_outcomes(actual: FloatArray, transforms: Sequence[str], last: FloatArray
                        ) -> tuple[FloatArray, FloatArray]:
    """Outcomes (H, n) in the user's units -> (w (H, n) in model units, log Jacobian
    (H,) summed over series). NaN stays NaN; non-positive values under a log give -inf
    density (they are impossible under the model)."""
    y = np.asarray(actual, dtype=np.float64)
    w = np.empty_like(y)
    logjac = np.zeros(y.shape[0])
    with np.errstate(divide="ignore", invalid="ignore"):
        for j, t in enumerate(transforms):
            col = y[:, j]
            if t == "none":
                w[:, j] = col
            elif t == "diff":
                w[:, j] = col - last[j]
            elif t == "log1p":
                w[:, j] = np.log1p(col)
                logjac -= np.log1p(col)
            else:  # log, logdiff
                w[:, j] = np.log(col) - (np.log(last[j]) if t == "logdiff" else 0.0)
                logjac -= np.log(col)
    return w, logjac


def mixture_log_scores(
    B: FloatArray,
    Sigma: FloatArray,
    history: FloatArray,
    exog_rows: FloatArray,
    w: FloatArray,
    differenced: Sequence[bool],
    *,
    n_det: int,
) -> FloatArray:
    """log (1/S) sum_s N(w_h; mu_h^(s), V_h^(s)) for h = 1..H, (H,); NaN where w_h has a
    NaN.

    Parameters
    ----------
    B : (S, k, n), Sigma : (S, n, n) parameter draws.
    history : (p, n) last observations in model units, oldest first.
    exog_rows : (H, m) deterministic/exogenous rows.
    w : (H, n) outcomes in model units (see :func:`model_unit_outcomes`).
    differenced : per series, whether w is a sum of differences (cumulative).
    """
    S, _, n = B.shape
    H = exog_rows.shape[0]
    if w.shape != (H, n):
        raise SpecificationError(f"outcomes must have shape ({H}, {n}); got {w.shape}")
    cum = np.asarray(differenced, dtype=bool)
    conds = ConditionSet(np.tile(np.arange(n), H), np.repeat(np.arange(1, H + 1), n),
                         np.tile(cum, H), np.zeros(H * n), np.zeros(H * n))
    M = np.linalg.cholesky(Sigma)
    R = restriction_matrix(B, M, n_det, history.shape[0], H, conds)  # (S, Hn, Hn)
    mean_path = recursion_with_shocks(B, np.zeros((S, H, n)), history, exog_rows)
    mu = restricted_values(mean_path, conds).reshape(S, H, n)
    out = np.full(H, np.nan)
    for h in range(H):
        if not np.all(np.isfinite(w[h])):
            continue
        Rh = R[:, h * n:(h + 1) * n]
        L = np.linalg.cholesky(Rh @ Rh.transpose(0, 2, 1))
        u = np.linalg.solve(L, (w[h] - mu[:, h])[..., None])[..., 0]
        logdet = 2.0 * np.log(np.diagonal(L, axis1=1, axis2=2)).sum(axis=1)
        logpdf = -0.5 * (n * np.log(2 * np.pi) + logdet + np.sum(u**2, axis=1))
        out[h] = float(logsumexp(logpdf) - np.log(S))
    return out


def differenced_flags(transforms: Sequence[str]) -> list[bool]:
    return [t in DIFFERENCING for t in transforms]
