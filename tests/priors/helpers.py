"""Small builders shared by the numerics tests."""

from __future__ import annotations

import numpy as np
import pandas as pd

from priors.data import Deterministics, build_design, load_series
from priors.shrinkage import MinnesotaHyper, minnesota_prior

#: settings that keep a test on one configuration: levels, no seasonal dummies, no dummy
#: observations (the automatic configuration would otherwise choose them per data set)
FIXED = {"transforms": None, "seasonal": False, "sum_coef": None, "initial": None}


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


def two_lines(T: int = 96, seed: int = 11, start: str = "2017-01-01") -> pd.DataFrame:
    """Invented demo-style monthly data (for behaviour checks only, no reference values):
    tyres lead inner tubes by one month."""
    rng = np.random.default_rng(seed)
    y = np.zeros((T, 2))
    y[0] = [200.0, 300.0]
    for t in range(1, T):
        y[t] = [40 + 0.8 * y[t - 1, 0], 60 + 0.3 * y[t - 1, 0] + 0.5 * y[t - 1, 1]]
        y[t] += rng.normal(0, [8.0, 10.0])
    idx = pd.date_range(start, periods=T, freq="MS")
    return pd.DataFrame(y, index=idx, columns=["tyres", "inner_tubes"])
