"""Rolling-origin scoring of a model setting against simple benchmarks on a corpus set.

At every origin the model is fitted on the rows before it and forecasts ``horizon``
steps; so are the benchmarks:

- ``seasonal_naive``: last season's value, Gaussian errors from the seasonal differences
  (s.d. grows with the number of seasons ahead); non-seasonal sets skip it;
- ``holt_winters``: per-series exponential smoothing with additive errors, additive damped
  trend and (with a period) additive seasonality: statsmodels' ETSModel (test-only
  oracle), through :func:`service.compute.ets.ets_forecast`;
- ``ols_var``: the flat-prior VAR (OLS posterior with parameter uncertainty), lag order by
  the Schwarz criterion, with seasonal dummies on seasonal sets, in the data's units;
- ``random_walk``: no change, Gaussian errors with variance h * var(first differences).

Scores per model, series and horizon: RMSE of the predictive mean, CRPS (ensemble or
Gaussian closed form; Gneiting & Raftery 2007) and the coverage of the central 50% and
90% intervals. Relative scores divide the model's by a benchmark's, series by series and
horizon by horizon, then average (so no series dominates by its units).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats
from threadpoolctl import threadpool_limits

from priors import FanfoldVAR
from priors.scores import crps_ensemble, crps_normal
from service.compute.ets import ets_forecast

from .corpus import CorpusSet

BENCHMARKS = ("seasonal_naive", "holt_winters", "ols_var", "random_walk")
LEVELS = (0.5, 0.9)


@dataclass
class Scores:
    """Per model: squared errors, CRPS and interval hits, each (O, h, n), NaN where the
    outcome lies past the end of the data."""

    names: tuple[str, ...]
    se: dict[str, np.ndarray] = field(default_factory=dict)
    crps: dict[str, np.ndarray] = field(default_factory=dict)
    hits: dict[tuple[str, float], np.ndarray] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    def rmse(self, model: str) -> np.ndarray:
        """(h, n) RMSE over origins."""
        return np.sqrt(np.nanmean(self.se[model], axis=0))

    def relative(self, model: str, benchmark: str, metric: str = "rmse") -> float:
        """Mean over series and horizons of the model's score over the benchmark's."""
        if metric == "rmse":
            a, b = self.rmse(model), self.rmse(benchmark)
        else:
            a, b = np.nanmean(self.crps[model], axis=0), np.nanmean(self.crps[benchmark], axis=0)
        return float(np.nanmean(a / b))

    def coverage(self, model: str, level: float) -> float:
        return float(np.nanmean(self.hits[(model, level)]))


def _gaussian(center: np.ndarray, sd: np.ndarray, actual: np.ndarray
              ) -> tuple[np.ndarray, np.ndarray, dict[float, np.ndarray]]:
    hits = {}
    for level in LEVELS:
        z = stats.norm.ppf(0.5 + level / 2)
        hits[level] = ((center - z * sd <= actual) & (actual <= center + z * sd)).astype(float)
    return (center - actual) ** 2, crps_normal(center, sd, actual), hits


def _from_paths(paths: np.ndarray, actual: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, dict[float, np.ndarray]]:
    filled = np.where(np.isnan(actual), 0.0, actual)
    hits = {}
    for level in LEVELS:
        lo, hi = np.quantile(paths, [0.5 - level / 2, 0.5 + level / 2], axis=0)
        hits[level] = ((lo <= actual) & (actual <= hi)).astype(float)
    return (paths.mean(axis=0) - actual) ** 2, crps_ensemble(paths, filled), hits


def ols_var(train: pd.DataFrame, period: int | None) -> FanfoldVAR:
    """The OLS VAR benchmark fitted on ``train``: lags by the Schwarz criterion up to the
    largest order that leaves at least 3 rows per coefficient of an equation (common
    practice, so that OLS is well determined), seasonal dummies with a period."""
    T, n = train.shape
    m = 1 + (period - 1 if period else 0)
    top = max(p for p in range(1, 14) if p == 1 or T - p >= 3 * (m + n * p))
    return FanfoldVAR(prior="flat", lags="auto", max_lags=top,
                      seasonal=period is not None).fit(train)


def score_set(cs: CorpusSet, params: dict[str, object] | None, *, draws: int = 1000,
              seed: int = 1, benchmarks: tuple[str, ...] = BENCHMARKS,
              origins: int | None = None) -> Scores:
    """Score ``FanfoldVAR(**params)`` (``params`` None: benchmarks only) on ``cs``."""
    data, h = cs.data, cs.horizon
    values = data.to_numpy(dtype=np.float64)
    T, n = values.shape
    O = cs.origins if origins is None else origins
    out = Scores(tuple(map(str, data.columns)))
    models = ([] if params is None else ["model"]) + [
        b for b in benchmarks if b != "seasonal_naive" or cs.period]

    def store(name: str, i: int, parts: tuple) -> None:
        se, crps, hits = parts
        out.se.setdefault(name, np.full((O, h, n), np.nan))[i] = se
        out.crps.setdefault(name, np.full((O, h, n), np.nan))[i] = crps
        for level, hit in hits.items():
            out.hits.setdefault((name, level), np.full((O, h, n), np.nan))[i] = hit

    seeds = np.random.SeedSequence(seed).spawn(O)
    with threadpool_limits(limits=1, user_api="blas"):  # small matrices: one thread
        for i, o in enumerate(range(T - O, T)):
            _origin(cs, params, models, o, seeds[i], draws, lambda name, parts, i=i:
                    store(name, i, parts))
    missing = np.isnan(np.stack(list(out.se.values()))).any(axis=0)
    for arr in [*out.crps.values(), *out.hits.values()]:
        arr[missing] = np.nan
    return out


def _origin(cs: CorpusSet, params: dict[str, object] | None, models: list[str], o: int,
            seed: np.random.SeedSequence, draws: int, store) -> None:  # noqa: ANN001
    """Fit every model on the rows before ``o`` and score its forecasts."""
    data, h = cs.data, cs.horizon
    values = data.to_numpy(dtype=np.float64)
    T, n = values.shape
    rng = np.random.default_rng(seed)
    train = data.iloc[:o]
    actual = np.full((h, n), np.nan)
    actual[: min(h, T - o)] = values[o: o + h]
    hist = values[:o]
    steps = np.arange(1, h + 1)[:, None]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for name in models:
            if name == "model":
                model = FanfoldVAR(**params)  # type: ignore[arg-type]
                model = (model.fit(train, rng=rng) if model.uses_gibbs
                         else model.fit(train))
                parts = _from_paths(model.forecast(h, rng=rng, draws=draws).paths, actual)
            elif name == "ols_var":
                fc = ols_var(train, cs.period).forecast(h, rng=rng, draws=draws)
                parts = _from_paths(fc.paths, actual)
            elif name == "random_walk":
                sd = np.sqrt(steps * np.var(np.diff(hist, axis=0), axis=0, ddof=1))
                parts = _gaussian(np.repeat(hist[-1:], h, axis=0), sd, actual)
            elif name == "seasonal_naive":
                p = cs.period
                assert p is not None
                center = hist[-p:][np.arange(h) % p]
                base = np.std(hist[p:] - hist[:-p], axis=0, ddof=1)
                parts = _gaussian(center, base * np.sqrt(np.ceil(steps / p)), actual)
            else:
                mean, sd = ets_forecast(train, h, cs.period)
                parts = _gaussian(mean, sd, actual)
            store(name, parts)
