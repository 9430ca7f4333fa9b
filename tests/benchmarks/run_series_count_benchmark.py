"""Fit and forecast time against the number of series (not a pytest module).

Usage::

    python tests/benchmarks/run_series_count_benchmark.py

Backs the README's "Limits and what they cost" table and the default
``FANFOLD_MAX_SERIES``. Data: invented random walks with a common yearly cycle (sizes and
timing only, no claim about forecast quality), 120 monthly rows, n = 20, 50, 100, 200
series. Per n: one fit on fixed settings (1 lag, levels, no dummies) and one on the
automatic configuration up to 2 lags, then 1000 paths of 12 steps; one BLAS thread.
"""

from __future__ import annotations

import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from priors import FanfoldVAR  # noqa: E402

FIXED = {"lags": 1, "seasonal": False, "transforms": "none", "sum_coef": None, "initial": None}


def main() -> None:
    rng = np.random.default_rng(0)
    print("| series | settings | lags | fit s | forecast s (1000 x 12) |")
    print("|---|---|---|---|---|")
    with threadpool_limits(limits=1, user_api="blas"), warnings.catch_warnings():
        warnings.simplefilter("ignore")  # short-history advice at 200 series
        for n in (20, 50, 100, 200):
            T = 120
            cycle = 10 * np.sin(np.arange(T) / 12 * 2 * np.pi)[:, None]
            y = 100 + np.cumsum(rng.normal(size=(T, n)), axis=0) + cycle
            frame = pd.DataFrame(y, columns=[f"s{i}" for i in range(n)],
                                 index=pd.date_range("2015-01-01", periods=T, freq="MS"))
            for label, params in (("fixed", FIXED), ("auto, up to 2 lags", {"max_lags": 2})):
                start = time.perf_counter()
                model = FanfoldVAR(**params).fit(frame)
                fit = time.perf_counter() - start
                start = time.perf_counter()
                model.forecast(12, rng=np.random.default_rng(1), draws=1000)
                forecast = time.perf_counter() - start
                print(f"| {n} | {label} | {model.lags_} | {fit:.2f} | {forecast:.2f} |",
                      flush=True)


if __name__ == "__main__":
    main()
