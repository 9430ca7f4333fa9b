"""Rolling-origin evaluation: refit at each origin, forecast 1..h, score against what
happened, beside simple benchmarks on the same origins.

Models compared (all give full predictive distributions):

- ``"model"``: :class:`FanfoldVAR` with the given settings, tuned again at every origin;
- ``"ols_var"``: the same VAR with the flat prior (OLS posterior, parameter uncertainty
  included), same lags;
- ``"random_walk"``: no change, Gaussian errors with variance h * var(first differences);
- ``"seasonal_naive"``: last year's value, Gaussian errors from seasonal differences
  (needs a seasonal period).

Scores per model, series and horizon: RMSE of the mean, MAE of the median, CRPS (fair
ensemble CRPS for draws, closed form for the Gaussian benchmarks), interval coverage.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from ._types import FloatArray
from .errors import SpecificationError
from .model import FanfoldVAR
from .scores import crps_ensemble, crps_normal, diebold_mariano, pit_values

__all__ = ["BacktestResult", "rolling_origin"]

BENCHMARKS = ("ols_var", "random_walk", "seasonal_naive")


@dataclass
class BacktestResult:
    """Outcomes and forecasts at every origin.

    actual : (O, h, n) realised values (NaN past the end of the data).
    mean, median, crps, lower, upper : per model, (O, h, n).
    pit : randomised PIT values of the draw-based models, (O, h, n).
    log_score : exact one-step log predictive density of the joint outcome, (O,), for
        the draw-based models when no series is transformed (else absent).
    """

    names: tuple[str, ...]
    origins: list[int]
    horizon: int
    coverage: float
    actual: FloatArray
    mean: dict[str, FloatArray] = field(default_factory=dict)
    median: dict[str, FloatArray] = field(default_factory=dict)
    crps: dict[str, FloatArray] = field(default_factory=dict)
    lower: dict[str, FloatArray] = field(default_factory=dict)
    upper: dict[str, FloatArray] = field(default_factory=dict)
    pit: dict[str, FloatArray] = field(default_factory=dict)
    log_score: dict[str, FloatArray] = field(default_factory=dict)

    @property
    def models(self) -> list[str]:
        return list(self.mean)

    def scores(self) -> pd.DataFrame:
        """One row per model, series and horizon: rmse, mae, crps, coverage, count."""
        rows = []
        for model in self.models:
            err_mean = self.mean[model] - self.actual
            err_med = self.median[model] - self.actual
            inside = (self.lower[model] <= self.actual) & (self.actual <= self.upper[model])
            for j, name in enumerate(self.names):
                for h in range(self.horizon):
                    ok = ~np.isnan(self.actual[:, h, j])
                    if not ok.any():
                        continue
                    rows.append({
                        "model": model, "series": name, "horizon": h + 1,
                        "rmse": float(np.sqrt(np.mean(err_mean[ok, h, j] ** 2))),
                        "mae": float(np.mean(np.abs(err_med[ok, h, j]))),
                        "crps": float(np.mean(self.crps[model][ok, h, j])),
                        "coverage": float(np.mean(inside[ok, h, j])),
                        "count": int(ok.sum()),
                    })
        return pd.DataFrame(rows)

    def relative(self, benchmark: str, metric: str = "rmse") -> pd.DataFrame:
        """metric(model) / metric(benchmark) per series and horizon (below 1: better)."""
        table = self.scores().pivot_table(index=["series", "horizon"], columns="model",
                                          values=metric)
        return table.div(table[benchmark], axis=0)

    def dm_test(self, benchmark: str, horizon: int, series: str,
                model: str = "model") -> tuple[float, float]:
        """Diebold-Mariano (HLN) test on squared errors of the means at one horizon."""
        j = self.names.index(series)
        ok = ~np.isnan(self.actual[:, horizon - 1, j])
        a = (self.mean[model] - self.actual)[ok, horizon - 1, j] ** 2
        b = (self.mean[benchmark] - self.actual)[ok, horizon - 1, j] ** 2
        return diebold_mariano(a, b, horizon)


def _gaussian(center: FloatArray, sd: FloatArray, actual: FloatArray, z: float
              ) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray, FloatArray]:
    return (center, center, crps_normal(center, sd, actual), center - z * sd,
            center + z * sd)


def rolling_origin(
    data: pd.DataFrame | FloatArray,
    *,
    params: Mapping[str, object] | None = None,
    origins: int = 24,
    horizon: int = 12,
    window: int | None = None,
    draws: int = 1000,
    coverage: float = 0.9,
    period: int | None = None,
    benchmarks: tuple[str, ...] = ("ols_var", "random_walk"),
    rng: np.random.Generator,
    progress: Callable[[int, int], None] | None = None,
) -> BacktestResult:
    """Evaluate ``FanfoldVAR(**params)`` on the last ``origins`` forecast origins.

    Origin o uses rows [:o] (or the last ``window`` of them) and forecasts rows o..o+h-1.
    ``period`` (e.g. 12) enables the seasonal-naive benchmark. ``progress(i, origins)``
    is called after each origin.
    """
    unknown = set(benchmarks) - set(BENCHMARKS)
    if unknown:
        raise SpecificationError(f"unknown benchmarks {sorted(unknown)}; choose from "
                                 f"{', '.join(BENCHMARKS)}")
    if "seasonal_naive" in benchmarks and not period:
        raise SpecificationError("the seasonal-naive benchmark needs period (e.g. 12)")
    params = dict(params or {})
    if isinstance(data, pd.DataFrame):
        frame = data
    else:
        arr = np.asarray(data, dtype=np.float64)
        frame = pd.DataFrame(arr, columns=[f"y{j + 1}" for j in range(arr.shape[1])])
    values = frame.to_numpy(dtype=np.float64)
    T, n = values.shape
    if origins < 1 or horizon < 1 or T - origins < 10:
        raise SpecificationError("need origins >= 1, horizon >= 1 and at least 10 rows "
                                 "before the first origin")
    first = T - origins
    result = BacktestResult(tuple(map(str, frame.columns)), list(range(first, T)), horizon,
                            coverage, np.full((origins, horizon, n), np.nan))
    z = float(stats.norm.ppf(0.5 + coverage / 2))
    lo_q, hi_q = 0.5 - coverage / 2, 0.5 + coverage / 2
    store: dict[str, list[tuple[FloatArray, ...]]] = {}
    pits: dict[str, list[FloatArray]] = {}
    logs: dict[str, list[float]] = {}
    for i, o in enumerate(result.origins):
        start = 0 if window is None else max(0, o - window)
        train = frame.iloc[start:o]
        end = min(o + horizon, T)
        actual = np.full((horizon, n), np.nan)
        actual[: end - o] = values[o:end]
        result.actual[i] = actual
        model = FanfoldVAR(**params).fit(train)  # type: ignore[arg-type]
        fitted = {"model": model}
        if "ols_var" in benchmarks:
            flat = {**params, "prior": "flat", "lags": model.lags_}
            for key in ("tightness", "sum_coef", "initial", "hyperprior"):
                flat.pop(key, None)
            fitted["ols_var"] = FanfoldVAR(**flat).fit(train)  # type: ignore[arg-type]
        untransformed = all(t == "none" for t in model.series_.transforms)
        for name, m in fitted.items():
            paths = m.forecast(horizon, rng=rng, draws=draws).paths
            filled = np.where(np.isnan(actual), 0.0, actual)
            store.setdefault(name, []).append((
                paths.mean(axis=0), np.median(paths, axis=0), crps_ensemble(paths, filled),
                np.quantile(paths, lo_q, axis=0), np.quantile(paths, hi_q, axis=0)))
            pits.setdefault(name, []).append(pit_values(rng, paths, filled))
            if untransformed and not model.series_.exog_names:
                logs.setdefault(name, []).append(m.one_step_log_density(actual[0]))
        hist = train.to_numpy(dtype=np.float64)
        steps = np.arange(1, horizon + 1)[:, None]
        if "random_walk" in benchmarks:
            sd = np.sqrt(steps * np.var(np.diff(hist, axis=0), axis=0, ddof=1))
            store.setdefault("random_walk", []).append(
                _gaussian(np.repeat(hist[-1:], horizon, axis=0), sd, actual, z))
        if "seasonal_naive" in benchmarks:
            assert period is not None
            seasonal = hist[-period:][(np.arange(horizon)) % period]
            base = np.std(hist[period:] - hist[:-period], axis=0, ddof=1)
            sd = base * np.sqrt(np.ceil(steps / period))
            store.setdefault("seasonal_naive", []).append(_gaussian(seasonal, sd, actual, z))
        if progress is not None:
            progress(i + 1, origins)
    for name, rows in store.items():
        mean, med, crps, lower, upper = (np.stack(a) for a in zip(*rows, strict=True))
        crps = np.where(np.isnan(result.actual), np.nan, crps)
        result.mean[name], result.median[name], result.crps[name] = mean, med, crps
        result.lower[name], result.upper[name] = lower, upper
    for name, values in pits.items():
        result.pit[name] = np.where(np.isnan(result.actual), np.nan, np.stack(values))
    for name, scores in logs.items():
        result.log_score[name] = np.array(scores)
    return result
