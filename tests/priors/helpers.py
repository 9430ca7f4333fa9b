"""Small builders shared by the numerics tests."""

from __future__ import annotations

import numpy as np

from priors.data import Deterministics, build_design, load_series
from priors.shrinkage import MinnesotaHyper, minnesota_prior


def design_and_prior(y: np.ndarray, lags: int = 2, *, tightness: float = 0.3,
                     sum_coef: float | None = None, initial: float | None = None,
                     seasonal_period: int | None = None):
    """Design and Minnesota prior for a (T, n) array (random-walk prior mean)."""
    series = load_series(y, period=seasonal_period)
    det = Deterministics(constant=True, seasonal=seasonal_period is not None)
    design = build_design(series, lags, det)
    hyper = MinnesotaHyper(tightness=tightness, sum_coef=sum_coef, initial=initial)
    prior = minnesota_prior(design, hyper, np.ones(series.n))
    return design, prior
