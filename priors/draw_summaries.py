"""Posterior summaries computed from stored draws (for samplers without closed forms).

Shapes: B (S, k, n), Sigma (S, n, n); S draws pooled over chains.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy.special import logsumexp

from ._types import FloatArray

__all__ = ["coefficient_table", "mixture_log_density"]


def coefficient_table(B: FloatArray, labels: Sequence[str], names: Sequence[str],
                      level: float) -> pd.DataFrame:
    """Mean, s.d. and the central ``level`` interval (draw quantiles) of every
    coefficient; columns equation, regressor, mean, sd, lower, upper."""
    lo, hi = np.quantile(B, [0.5 - level / 2, 0.5 + level / 2], axis=0)
    mean, sd = B.mean(axis=0), B.std(axis=0, ddof=1)
    k, n = mean.shape
    return pd.DataFrame([
        {"equation": names[i], "regressor": labels[r], "mean": mean[r, i], "sd": sd[r, i],
         "lower": lo[r, i], "upper": hi[r, i]}
        for i in range(n) for r in range(k)
    ])


def mixture_log_density(B: FloatArray, Sigma: FloatArray, x: FloatArray, y: FloatArray
                        ) -> float:
    """log p(y | data) for the one-step predictive as the Rao-Blackwellised mixture
    (1/S) sum_s N(y; B_s'x, Sigma_s), via logsumexp (methods brief sec. 9: not a KDE)."""
    n = Sigma.shape[-1]
    resid = y[None, :] - np.einsum("skn,k->sn", B, x)
    L = np.linalg.cholesky(Sigma)
    u = np.linalg.solve(L, resid[..., None])[..., 0]
    logdet = 2.0 * np.log(np.diagonal(L, axis1=1, axis2=2)).sum(axis=1)
    logpdf = -0.5 * (n * np.log(2 * np.pi) + logdet + np.sum(u**2, axis=1))
    return float(logsumexp(logpdf) - np.log(B.shape[0]))
