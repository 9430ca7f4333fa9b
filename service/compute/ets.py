"""Exponential smoothing per series as a backtest benchmark (what many planning teams
run today), via statsmodels' ETSModel: additive errors, additive damped trend, and
additive seasonality when a period is given and the history covers two seasons.

statsmodels is an optional dependency here: ``pip install 'fanfold[evaluation]'``.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from priors.errors import SpecificationError

__all__ = ["ets_forecast", "require_statsmodels"]


def require_statsmodels() -> None:
    try:
        import statsmodels  # noqa: F401
    except ImportError as exc:
        raise SpecificationError("the exponential-smoothing benchmark needs statsmodels: "
                                 "pip install 'fanfold[evaluation]'") from exc


def ets_forecast(train: pd.DataFrame, horizon: int, period: int | None = None
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Mean and s.d. of each series' ETS forecast, both (horizon, n)."""
    from statsmodels.tsa.exponential_smoothing.ets import ETSModel

    means, sds = [], []
    for column in train.columns:
        y = train[column].astype(float)
        if not isinstance(y.index, pd.DatetimeIndex):
            y.index = pd.RangeIndex(len(y))
        seasonal = "add" if period and len(y) >= 2 * period + 2 else None
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # optimiser chatter on short series
            fit = ETSModel(y, error="add", trend="add", damped_trend=True,
                           seasonal=seasonal, seasonal_periods=period if seasonal else None,
                           ).fit(disp=False)
            pred = fit.get_prediction(start=len(y), end=len(y) + horizon - 1)
            means.append(np.asarray(pred.predicted_mean, dtype=float))
            sds.append(np.sqrt(np.asarray(pred.var_pred_mean, dtype=float)))
    return np.column_stack(means), np.column_stack(sds)
