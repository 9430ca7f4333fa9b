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
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from ._types import FloatArray
from .cancellation import checkpoint
from .errors import SpecificationError
from .forecast import check_quantiles
from .model import FanfoldVAR
from .scores import (
    crps_ensemble,
    crps_normal,
    diebold_mariano,
    energy_score,
    pinball_loss,
    pit_moment_test,
    pit_values,
)

__all__ = ["BacktestResult", "rank_settings", "rolling_origin"]

BENCHMARKS = ("ols_var", "random_walk", "seasonal_naive")
#: a benchmark from outside the engine: (train frame, horizon) -> (mean, sd), each (h, n)
ExtraForecaster = Callable[[pd.DataFrame, int], tuple[FloatArray, FloatArray]]


@dataclass
class BacktestResult:
    """Outcomes and forecasts at every origin.

    actual : (O, h, n) realised values (NaN past the end of the data).
    mean, median, crps, lower, upper : per model, (O, h, n).
    pit : randomised PIT values of the draw-based models, (O, h, n).
    pinball : pinball loss averaged over ``quantiles``, per model, (O, h, n).
    energy : energy score of all series jointly, each series divided by the s.d. of its
        one-step changes in the training window (so that no series dominates), (O, h).
    log_score : log predictive density of the joint outcome at each horizon, (O, h), for
        the draw-based models: exact at step 1 for the conjugate and flat priors, the
        Rao-Blackwellised mixture over parameter draws otherwise; in the user's units
        (transforms' Jacobians included). Absent with exogenous regressors.
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
    pinball: dict[str, FloatArray] = field(default_factory=dict)
    energy: dict[str, FloatArray] = field(default_factory=dict)
    quantiles: tuple[float, ...] = (0.05, 0.5, 0.95)

    @property
    def models(self) -> list[str]:
        return list(self.mean)

    def scores(self) -> pd.DataFrame:
        """One row per model, series and horizon: rmse, mae, crps, pinball (mean over
        ``quantiles``), coverage, count."""
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
                        "pinball": float(np.mean(self.pinball[model][ok, h, j])),
                        "coverage": float(np.mean(inside[ok, h, j])),
                        "count": int(ok.sum()),
                    })
        return pd.DataFrame(rows)

    def energy_scores(self) -> pd.DataFrame:
        """Mean energy score of all series jointly per model and horizon (standardised
        series; lower is better; Gneiting & Raftery 2007)."""
        rows = []
        for model, values in self.energy.items():
            for h in range(self.horizon):
                ok = np.isfinite(values[:, h])
                if ok.any():
                    rows.append({"model": model, "horizon": h + 1,
                                 "energy": float(values[ok, h].mean()),
                                 "count": int(ok.sum())})
        return pd.DataFrame(rows, columns=["model", "horizon", "energy", "count"])

    def dm_tests(self, metric: str = "crps") -> pd.DataFrame:
        """Diebold-Mariano tests with the Harvey, Leybourne & Newbold (1997) correction of
        the model against each benchmark, per series and horizon, on the CRPS (or
        "se", squared errors of the means). Negative statistics favour the model."""
        if metric not in ("crps", "se"):
            raise SpecificationError(f"metric must be 'crps' or 'se'; got {metric!r}")
        if "model" not in self.mean:
            return pd.DataFrame(columns=["benchmark", "series", "horizon", "statistic",
                                         "p_value"])

        def loss(name: str) -> FloatArray:
            if metric == "crps":
                return self.crps[name]
            return (self.mean[name] - self.actual) ** 2

        rows = []
        for bench in (m for m in self.models if m != "model"):
            a, b = loss("model"), loss(bench)
            for j, name in enumerate(self.names):
                for h in range(self.horizon):
                    ok = np.isfinite(a[:, h, j]) & np.isfinite(b[:, h, j])
                    if ok.sum() < 3:
                        continue
                    stat, p = diebold_mariano(a[ok, h, j], b[ok, h, j], h + 1)
                    rows.append({"benchmark": bench, "series": name, "horizon": h + 1,
                                 "statistic": stat, "p_value": p})
        return pd.DataFrame(rows, columns=["benchmark", "series", "horizon", "statistic",
                                           "p_value"])

    def log_scores(self) -> pd.DataFrame:
        """Mean log predictive density of the joint outcome per model and horizon
        (higher is better), with the number of origins scored."""
        rows = []
        for model, values in self.log_score.items():
            for h in range(self.horizon):
                ok = np.isfinite(values[:, h])
                if ok.any():
                    rows.append({"model": model, "horizon": h + 1,
                                 "log_score": float(values[ok, h].mean()),
                                 "count": int(ok.sum())})
        return pd.DataFrame(rows, columns=["model", "horizon", "log_score", "count"])

    def pit_tests(self, moments: int = 2) -> pd.DataFrame:
        """Calibration of each draw-based model, series and horizon: the HAC raw-moment
        test of the PITs (:func:`priors.scores.pit_moment_test`; bandwidth h - 1 for the
        serial correlation of h-step PITs); a small p-value means miscalibrated bands."""
        rows = []
        for model, u in self.pit.items():
            for j, name in enumerate(self.names):
                for h in range(self.horizon):
                    vals = u[:, h, j]
                    if np.isfinite(vals).sum() < 10:
                        continue
                    stat, p = pit_moment_test(vals, h + 1, moments)
                    rows.append({"model": model, "series": name, "horizon": h + 1,
                                 "statistic": stat, "p_value": p})
        return pd.DataFrame(rows, columns=["model", "series", "horizon", "statistic",
                                           "p_value"])

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


def _gaussian(center: FloatArray, sd: FloatArray, actual: FloatArray, z: float,
              quantiles: FloatArray) -> tuple[FloatArray, ...]:
    """The scores of a Gaussian forecast N(center, sd^2), (h, n) each."""
    qs = center[None] + stats.norm.ppf(quantiles)[:, None, None] * sd[None]
    pinball = np.mean([pinball_loss(q, actual, t) for q, t in zip(qs, quantiles,
                                                                   strict=True)], axis=0)
    return (center, center, crps_normal(center, sd, actual), center - z * sd,
            center + z * sd, pinball)


#: draws used for the energy score, whose pair term costs O(S^2) per step
ENERGY_DRAWS = 250


def _energy(rng: np.random.Generator, samples: FloatArray, actual: FloatArray,
            scale: FloatArray) -> FloatArray:
    """Energy score per step of (S, h, n) samples against (h, n), series divided by
    ``scale`` (n,), on at most ``ENERGY_DRAWS`` of the draws (an unbiased estimate of the
    same score; the pair term costs O(S^2)); NaN where an outcome is missing."""
    if samples.shape[0] > ENERGY_DRAWS:
        samples = samples[rng.choice(samples.shape[0], ENERGY_DRAWS, replace=False)]
    out = np.full(actual.shape[0], np.nan)
    for h in range(actual.shape[0]):
        if np.all(np.isfinite(actual[h])):
            out[h] = energy_score(samples[:, h] / scale, actual[h] / scale)
    return out


def _one_origin(
    frame: pd.DataFrame, o: int, params: dict[str, object], horizon: int,
    window: int | None, draws: int, coverage: float, period: int | None,
    benchmarks: tuple[str, ...], seed: np.random.SeedSequence,
    extra: Mapping[str, ExtraForecaster] | None = None,
    quantiles: tuple[float, ...] = (0.05, 0.5, 0.95),
) -> tuple[Any, ...]:
    """Fit and score one origin with its own random stream (so the result does not depend
    on the order or the process the origins run in)."""
    rng = np.random.default_rng(seed)
    values = frame.to_numpy(dtype=np.float64)
    T, n = values.shape
    start = 0 if window is None else max(0, o - window)
    train = frame.iloc[start:o]
    end = min(o + horizon, T)
    actual = np.full((horizon, n), np.nan)
    actual[: end - o] = values[o:end]
    z = float(stats.norm.ppf(0.5 + coverage / 2))
    lo_q, hi_q = 0.5 - coverage / 2, 0.5 + coverage / 2
    model = FanfoldVAR(**params)  # type: ignore[arg-type]
    # Gibbs-sampled settings draw their chains from this origin's stream too
    model = model.fit(train, rng=rng) if model.uses_gibbs else model.fit(train)
    fitted = {"model": model}
    if "ols_var" in benchmarks:
        flat = {**params, "prior": "flat", "lags": model.lags_}
        for key in ("tightness", "sum_coef", "initial", "hyperprior", "cross", "outliers",
                    "sample_hyper", "volatility", "local_trend"):
            flat.pop(key, None)
        fitted["ols_var"] = FanfoldVAR(**flat).fit(train)  # type: ignore[arg-type]
    rows: dict[str, tuple[FloatArray, ...]] = {}
    pits: dict[str, FloatArray] = {}
    logs: dict[str, float] = {}
    energies: dict[str, FloatArray] = {}
    filled = np.where(np.isnan(actual), 0.0, actual)
    hist = train.to_numpy(dtype=np.float64)
    scale = np.std(np.diff(hist, axis=0), axis=0, ddof=1)
    scale = np.where(scale > 0, scale, 1.0)
    qlev = np.asarray(quantiles, dtype=np.float64)
    for name, m in fitted.items():
        paths = m.forecast(horizon, rng=rng, draws=draws).paths
        qs = np.quantile(paths, np.concatenate([[lo_q, hi_q], qlev]), axis=0)
        pinball = np.mean([pinball_loss(q, filled, t)
                           for q, t in zip(qs[2:], qlev, strict=True)], axis=0)
        rows[name] = (paths.mean(axis=0), np.median(paths, axis=0),
                      crps_ensemble(paths, filled), qs[0], qs[1], pinball)
        pits[name] = pit_values(rng, paths, filled)
        energies[name] = _energy(rng, paths, actual, scale)
        if (not model.series_.exog_names and not m.time_varying_shocks() and m.ragged_ is None
                and not m.pools_local_trend()):  # the log density is the VAR's alone
            logs[name] = m.log_predictive_density(actual, rng=rng, draws=min(draws, 500))

    def gaussian(name: str, center: FloatArray, sd: FloatArray) -> None:
        rows[name] = _gaussian(center, sd, actual, z, qlev)
        samples = center[None] + sd[None] * rng.standard_normal((ENERGY_DRAWS, *sd.shape))
        energies[name] = _energy(rng, samples, actual, scale)

    steps = np.arange(1, horizon + 1)[:, None]
    if "random_walk" in benchmarks:
        sd = np.sqrt(steps * np.var(np.diff(hist, axis=0), axis=0, ddof=1))
        gaussian("random_walk", np.repeat(hist[-1:], horizon, axis=0), sd)
    if "seasonal_naive" in benchmarks:
        assert period is not None
        seasonal = hist[-period:][np.arange(horizon) % period]
        base = np.std(hist[period:] - hist[:-period], axis=0, ddof=1)
        gaussian("seasonal_naive", seasonal, base * np.sqrt(np.ceil(steps / period)))
    for name, forecaster in (extra or {}).items():
        center, sd = forecaster(train, horizon)
        gaussian(name, np.asarray(center, dtype=np.float64), np.asarray(sd, dtype=np.float64))
    return actual, rows, pits, logs, energies


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
    workers: int = 1,
    extra: Mapping[str, ExtraForecaster] | None = None,
    quantiles: tuple[float, ...] = (0.05, 0.5, 0.95),
) -> BacktestResult:
    """Evaluate ``FanfoldVAR(**params)`` on the last ``origins`` forecast origins.

    Origin o uses rows [:o] (or the last ``window`` of them) and forecasts rows o..o+h-1.
    ``period`` (e.g. 12) enables the seasonal-naive benchmark. ``progress(i, origins)``
    is called as origins finish. ``workers > 1`` runs origins in that many processes;
    each origin draws from its own stream spawned from ``rng``, so the result is the
    same for any number of workers. ``extra`` adds benchmarks from outside the engine
    (e.g. exponential smoothing): name -> f(train frame, horizon) -> (mean, sd), each
    (h, n), scored as Gaussian; with ``workers > 1`` they must be picklable.
    ``quantiles``: the levels whose pinball loss is averaged in ``scores()``.
    """
    quantiles = tuple(float(q) for q in check_quantiles(quantiles))
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
    T, n = frame.shape
    if origins < 1 or horizon < 1 or T - origins < 10:
        raise SpecificationError("need origins >= 1, horizon >= 1 and at least 10 rows "
                                 "before the first origin")
    first = T - origins
    result = BacktestResult(tuple(map(str, frame.columns)), list(range(first, T)), horizon,
                            coverage, np.full((origins, horizon, n), np.nan),
                            quantiles=quantiles)
    seeds = np.random.SeedSequence(int(rng.integers(2**63))).spawn(origins)
    args = [(frame, o, params, horizon, window, draws, coverage, period, benchmarks, seed,
             extra, quantiles) for o, seed in zip(result.origins, seeds, strict=True)]
    outputs: list[Any] = [None] * origins
    if workers > 1:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor, as_completed

        # "spawn": fresh interpreters, safe next to the threads of a server or BLAS pool
        context = multiprocessing.get_context("spawn")
        with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
            futures = {pool.submit(_one_origin, *a): i for i, a in enumerate(args)}
            for done, future in enumerate(as_completed(futures), start=1):
                outputs[futures[future]] = future.result()
                if progress is not None:
                    progress(done, origins)
    else:
        for i, a in enumerate(args):
            checkpoint()
            outputs[i] = _one_origin(*a)
            if progress is not None:
                progress(i + 1, origins)
    for i, (actual, rows, pits, logs, energies) in enumerate(outputs):
        result.actual[i] = actual
        for name, values in rows.items():
            for store, value in zip((result.mean, result.median, result.crps, result.lower,
                                     result.upper, result.pinball), values, strict=True):
                store.setdefault(name, np.full((origins, horizon, n), np.nan))[i] = value
        for name, value in energies.items():
            result.energy.setdefault(name, np.full((origins, horizon), np.nan))[i] = value
        for name, value in pits.items():
            result.pit.setdefault(name, np.full((origins, horizon, n), np.nan))[i] = value
        for name, value in logs.items():
            result.log_score.setdefault(name, np.full((origins, horizon), np.nan))[i] = value
    missing = np.isnan(result.actual)
    for store in (result.crps, result.pit, result.pinball):
        for name in store:
            store[name][missing] = np.nan
    return result


def rank_settings(
    data: pd.DataFrame | FloatArray,
    candidates: Mapping[str, Mapping[str, object]],
    *,
    rng: np.random.Generator,
    **kwargs: Any,
) -> pd.DataFrame:
    """Backtest several model settings on the same origins and rank them.

    Scores are made unit-free per series by dividing by the random walk's on the same
    origins, then averaged over series and horizons; lower is better. Every candidate
    draws from the same seed. Returns one row per candidate: relative CRPS, relative
    RMSE, mean coverage, sorted by relative CRPS.
    """
    if not candidates:
        raise SpecificationError("give at least one candidate setting")
    seed = int(rng.integers(2**63))
    rows = []
    for name, params in candidates.items():
        result = rolling_origin(data, params=params, rng=np.random.default_rng(seed),
                                benchmarks=("random_walk",), **kwargs)
        crps = result.relative("random_walk", "crps")["model"].mean()
        rmse = result.relative("random_walk", "rmse")["model"].mean()
        cover = result.scores().query("model == 'model'")["coverage"].mean()
        rows.append({"candidate": name, "relative_crps": float(crps),
                     "relative_rmse": float(rmse), "coverage": float(cover)})
    return pd.DataFrame(rows).sort_values("relative_crps").reset_index(drop=True)
