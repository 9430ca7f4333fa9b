"""Type aliases and the axis conventions used across :mod:`priors`.

Axis conventions (all arrays are float64 unless stated):

- ``Y``: (T, n) observations, one column per series, rows in time order.
- ``X``: (T, k) regressors, k = m + n*p: the m deterministic/exogenous columns first,
  then the lag-1 block (series 1..n), lag 2, ..., lag p.
- ``B``: (k, n) coefficients; column i is equation i, so ``Y = X @ B + E``.
- ``Sigma``: (n, n) innovation covariance.
- Draws stack on axis 0: ``B_draws`` is (S, k, n), ``Sigma_draws`` is (S, n, n).
- Forecast paths are (S, h, n): draw, step, series.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]
IntArray = NDArray[np.int64]
