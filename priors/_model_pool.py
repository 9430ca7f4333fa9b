"""The local-trend pool of :class:`priors.model.FanfoldVAR`: forecasts that mix the VAR's
predictive with a per-series local damped trend (:mod:`priors.localtrend`).

Why: a VAR's drift is a constant over the whole sample, so when growth slows (or a season
shifts) its forecasts keep the old slope; a local level and damped trend follows the
change. Pooling the two predictive densities linearly, ``(1 - w) p_VAR + w p_trend``,
keeps the VAR's cross-series information where it forecasts better and lets the local
trend in where it does (the pool of Geweke & Amisano 2011, weights from past forecasts).

``local_trend``:

- None (the default): the VAR alone.
- a number w in [0, 1]: the weight of the local trend, fixed.
- "auto": w from a rolling-origin check inside the fit. At each of the last
  ``INNER_ORIGINS`` periods the VAR (its fitted settings, coefficients re-estimated) and
  the local trend (re-fitted) forecast up to ``max(period, 8)`` steps from the rows before
  it, and score the outcomes by their log predictive density (the VAR's joint normal
  density with its paths' mean and covariance; the trend's product of its series' normal
  densities). The VAR's weight maximises the pooled log score plus ``K log(1 - w)``, K the
  number of inner origins (:func:`priors.pooling.pool_weight`; a prior that leans towards
  the VAR, so that a few origins of luck do not move the default away from it).

Forecasts draw ``round((1 - w) S)`` paths from the VAR and the rest from the local trend
(series independent). Scenarios, impulse responses and the other summaries of the
posterior are the VAR's alone. Not with exogenous regressors, a ragged edge, or the Gibbs
samplers (an error says so).

A mixin: the methods read the fitted attributes that ``FanfoldVAR.fit`` sets.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from ._types import FloatArray
from .calendar import Calendar
from .errors import SpecificationError, TooFewObservationsError
from .localtrend import LocalTrendFit, fit_local_trend, forecast_moments, simulate_local_trend
from .pooling import pool_log_score, pool_weight

__all__ = ["INNER_ORIGINS", "LocalTrendCheck", "LocalTrendPool", "trend_period"]

#: inner origins of the weight check (the last K periods of the data)
INNER_ORIGINS = 16
#: paths per VAR forecast in the weight check
CHECK_DRAWS = 500
#: fewest usable inner origins for a weight; with fewer, the VAR alone (w = 0)
MIN_ORIGINS = 4
#: the check's own seed when fit gets no generator (a fit stays reproducible)
CHECK_SEED = 20261205


@dataclass(frozen=True)
class LocalTrendCheck:
    """What the weight check saw: inner origins used, steps scored, the pooled log scores
    of the VAR alone, the trend alone and the chosen pool, and the trend's weight."""

    origins: int
    steps: int
    log_score_var: float
    log_score_trend: float
    log_score_pool: float
    weight: float

    def describe(self) -> str:
        return (f"local trend weight {self.weight:.2f} from {self.origins} inner origins "
                f"({self.steps} forecasts; log score VAR {self.log_score_var:.1f}, local "
                f"trend {self.log_score_trend:.1f}, pool {self.log_score_pool:.1f})")


def trend_period(calendar: Calendar, rows: int) -> int:
    """Seasonal period of the local trend: 12 for monthly, 4 for quarterly, 7 (5 for
    business days) for daily dates, the given period of plain rows; 0 (no season) for
    weekly and other data (no whole number of periods per year), or when fewer than
    two seasons and two rows are known."""
    period = {"monthly": 12, "quarterly": 4}.get(calendar.kind, 0)
    if calendar.kind == "daily":
        period = 5 if calendar.freq == "B" else 7
    elif calendar.kind == "plain":
        period = int(calendar.period or 0)
    return period if rows >= 2 * period + 2 else 0


def _check_setting(value: object) -> None:
    if value is None or value == "auto":
        return
    if isinstance(value, bool) or not isinstance(value, int | float | np.floating) \
            or not 0.0 <= float(value) <= 1.0:
        raise SpecificationError(f"local_trend must be None, 'auto' or a weight in [0, 1]; "
                                 f"got {value!r}")


class LocalTrendPool:
    """Fitting and drawing the local-trend side of the pool."""

    def _check_local_trend(self) -> None:
        _check_setting(self.local_trend)
        if self.local_trend is not None and self.uses_gibbs:
            raise SpecificationError("local_trend is built for the conjugate and flat priors "
                                     "with constant volatility, not the Gibbs samplers")

    def pools_local_trend(self) -> bool:
        """Whether forecasts mix in the local trend (a weight above 0)."""
        return getattr(self, "local_trend_weight_", 0.0) > 0.0

    def _fit_local_trend(self, weight: float | None, rng: np.random.Generator | None) -> None:
        """Set ``local_trend_fits_``, ``local_trend_weight_`` and ``local_trend_check_``:
        ``weight`` given (a restored or appended model) or from the setting."""
        self.local_trend_fits_: tuple[LocalTrendFit, ...] | None = None
        self.local_trend_weight_ = 0.0
        self.local_trend_check_: LocalTrendCheck | None = None
        if self.local_trend is None:
            return
        series = self.series_
        if series.exog_names or self.ragged_ is not None:
            raise SpecificationError("local_trend does not take exogenous regressors or "
                                     "incomplete last periods (a ragged edge) yet")
        period = trend_period(series.calendar, series.levels.shape[0])
        self.local_trend_fits_ = tuple(fit_local_trend(series.levels[:, i], period)
                                       for i in range(series.n))
        if weight is None:
            weight = (self._local_trend_weight(rng) if self.local_trend == "auto"
                      else float(self.local_trend))  # type: ignore[arg-type]
        self.local_trend_weight_ = float(weight)

    def _local_trend_weight(self, rng: np.random.Generator | None) -> float:
        """The weight check of "auto" (module notes); sets ``local_trend_check_``."""
        rng = np.random.default_rng(CHECK_SEED) if rng is None else rng
        series, fits = self.series_, self.local_trend_fits_
        assert fits is not None
        levels = series.levels
        period = fits[0].period
        horizon = max(period, 8)
        params = dict(self.resolved_params(), local_trend=None)
        index = self._level_index() if series.calendar.index is not None else None
        frame = pd.DataFrame(levels, index=index, columns=list(series.names))
        a: list[float] = []
        b: list[float] = []
        used = 0
        for j in range(1, INNER_ORIGINS + 1):
            cut = levels.shape[0] - j
            steps = min(horizon, j)
            outcome = levels[cut:cut + steps]
            train = frame.iloc[:cut] if index is not None else levels[:cut]
            try:
                var = type(self)(**params).fit(  # type: ignore[arg-type]
                    train, names=None if index is not None else list(series.names),
                    period=series.calendar.period, warn=False)
                trend = [fit_local_trend(levels[:cut, i], period, warm=fits[i])
                         for i in range(series.n)]
            except (TooFewObservationsError, SpecificationError):
                break  # earlier origins have even fewer rows
            paths = var.forecast(steps, rng=rng, draws=CHECK_DRAWS).paths
            for q in range(steps):
                cov = np.atleast_2d(np.cov(paths[:, q].T)) + 1e-9 * np.eye(series.n)
                a.append(float(stats.multivariate_normal.logpdf(outcome[q],
                                                                paths[:, q].mean(0), cov)))
            moments = [forecast_moments(f, steps) for f in trend]
            mean = np.stack([m for m, _ in moments], axis=1)
            sd = np.sqrt(np.stack([v for _, v in moments], axis=1))
            b.extend(stats.norm.logpdf(outcome, mean, sd).sum(axis=1).tolist())
            used += 1
        if used < MIN_ORIGINS:
            self.local_trend_check_ = None
            return 0.0
        sa, sb = np.asarray(a), np.asarray(b)
        w_var = pool_weight(sa, sb, prior_weight=float(used))
        self.local_trend_check_ = LocalTrendCheck(
            used, sa.size, float(sa.sum()), float(sb.sum()),
            pool_log_score(sa, sb, w_var), 1.0 - w_var)
        return 1.0 - w_var

    def _local_trend_paths(self, rng: np.random.Generator, draws: int, horizon: int
                           ) -> FloatArray:
        """(draws, horizon, n) paths of the local trend in the user's units."""
        fits = self.local_trend_fits_
        assert fits is not None
        return np.stack([simulate_local_trend(rng, f, horizon, draws) for f in fits], axis=-1)

    def _pool_split(self, draws: int) -> int:
        """How many of ``draws`` paths come from the local trend."""
        return int(round(draws * self.local_trend_weight_))
