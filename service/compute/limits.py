"""What a request may ask for, and what its work will cost, checked before it runs.

Two kinds of checks, both answered with a 422 problem naming the field
(:class:`service.errors.LimitExceeded`):

- static limits of :class:`service.config.Settings` (series, lags, coefficients, draws,
  horizon, Gibbs work, stored draws): :func:`check_model_limits`,
  :func:`check_output_limits`, :func:`check_backtest_limits`;
- time: :class:`Shape` and the ``*_seconds`` functions estimate the seconds of one core
  a request's computation takes (constants measured on the reference machine; the
  setting ``cost_scale`` adjusts them to another), and :func:`admit` refuses work that
  cannot finish within the request timeout and charges the caller's rate limit one token
  per ``rate_limit_token_s`` estimated seconds (OWASP API4: expensive requests cost more).
  ``tests/benchmarks/run_cost_benchmark.py`` prints estimated against measured seconds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from priors.model import default_max_lags

from ..config import Settings
from ..errors import LimitExceeded
from ..schemas import BacktestCreate, ForecastSettings, ModelSettings

__all__ = [
    "SWEEP_COST",
    "Admission",
    "Shape",
    "admit_forecast",
    "check_backtest_limits",
    "check_model_limits",
    "check_output_limits",
    "fit_seconds",
    "forecast_seconds",
    "gibbs_work",
    "inline_cost",
    "lags_and_terms",
    "scenario_seconds",
    "shocks_seconds",
]


def _over(field: str, value: int, limit: int, advice: str) -> None:
    if value > limit:
        raise LimitExceeded(
            field, f"{field}: {value} is over this server's limit of {limit}; {advice}"
        )


def lags_and_terms(spec: ModelSettings) -> tuple[int, int]:
    """The largest lag order the fit may use and the deterministic terms per equation."""
    p = spec.lags if isinstance(spec.lags, int) else (spec.max_lags or default_max_lags("monthly"))
    seasonal = spec.seasonal is True or spec.seasonal == "auto"  # 'auto' may choose them
    return p, int(spec.constant) + int(spec.trend) + (11 if seasonal else 0)


def _fits(spec: ModelSettings, n: int, p: int) -> int:
    """About how many fits the automatic configuration makes: per structure (seasonal
    or not, levels or logs) one per lag order, one flip per series, and a joint tuning
    of the dummy weights worth a few dozen fits (see priors.autoconfig)."""
    structures = (1 + (spec.seasonal == "auto")) * (1 + (spec.transforms == "auto"))
    lag_orders = p if spec.lags == "auto" else 1
    flips = n if spec.transforms == "auto" else 0
    dummies = 40 if "auto" in (spec.sum_coef, spec.initial) else 0
    return structures * lag_orders + flips + dummies + 1


def inline_cost(spec: ForecastSettings, n: int, T: int) -> float:
    """Rough flops of a conjugate one-shot forecast, for choosing where it runs: the fits
    (T k^2 each, :func:`_fits`) plus the simulation (draws x horizon x (k + n) x n).
    About 1e6 is 5 ms on one core (n=3, p=4, T=120, 1000 draws, 12 steps)."""
    p, m = lags_and_terms(spec)
    k = n * p + m
    return float(_fits(spec, n, p) * T * k * k + spec.draws * spec.horizon * (k + n) * n)


# A chain-sweep's fixed cost in units of n k^2 (one unit took about 1 ns at n = 20,
# k = 261; a chain-sweep of a one-series model 25-160 us), so that long runs of tiny
# models count too.
SWEEP_COST = 50_000


def gibbs_work(spec: ModelSettings, n: int, T: int | None = None) -> tuple[float, str]:
    """The sampler's work, chains x (burn + keep x thin) x (a chain-sweep's units +
    SWEEP_COST) (k coefficients per equation at the largest lag order; T rows, or 20 k
    when not known), and the setting that drives it most; (0, "") for the exact
    samplers. A unit is about 1 ns of one core."""
    if not spec.uses_gibbs:
        return 0.0, ""
    p, m = lags_and_terms(spec)
    k = n * p + m
    field = "burn" if spec.burn > spec.keep * spec.thin else "keep"
    sweeps = spec.chains * (spec.burn + spec.keep * spec.thin)
    rows = 20 * k if T is None else T
    return float(sweeps * (_sweep_units(spec, n, k, rows) + SWEEP_COST)), field


#: stochastic volatility's fixed cost per chain-sweep in units (the log-volatility path
#: and the reweighted posterior: measured 2-5 ms per sweep at n = 5-10, k = 22-132,
#: T = 108-118, almost flat in k)
SV_SWEEP_UNITS = 2_000_000


def _sweep_units(spec: ModelSettings, n: int, k: int, T: int) -> float:
    """A chain-sweep's work: n k^2 for the Gibbs sampler; for stochastic volatility a
    fixed part plus one QR of the reweighted data, T (k + n)^2."""
    if spec.prior == "independent":
        return float(n * k * k)
    return float(SV_SWEEP_UNITS + T * (k + n) ** 2)


def check_model_limits(spec: ModelSettings, n: int, T: int, limits: Settings) -> None:
    """Raise :class:`LimitExceeded` (422) naming the first model limit the data exceed."""
    p, m = lags_and_terms(spec)
    _over("series", n, limits.max_series, "send fewer series")
    _over("series", T, limits.max_observations, "send fewer observations per series")
    _over("lags", p, limits.max_lags, "lower lags or max_lags")
    _over(
        "lags",
        n * (n * p + m),
        limits.max_coefficients,
        "lower lags or send fewer series (coefficients = series x (series x lags + terms))",
    )
    if not spec.uses_gibbs:
        return
    work, field = gibbs_work(spec, n, T)
    if work > limits.max_gibbs_work:
        raise LimitExceeded(field, (
            f"{field}: the Gibbs sampler's work, chains x (burn + keep x thin) x (series x "
            f"coefficients per equation^2 + {SWEEP_COST}) = {work:.3g}, is over this "
            f"server's limit of {limits.max_gibbs_work:.3g}; lower keep, thin, burn or "
            "chains (or lags)"))
    k = n * p + m
    stored = spec.chains * spec.keep * (k * n + n * n)
    if stored > limits.max_stored_draws:
        raise LimitExceeded("keep", (
            f"keep: the draws to store, chains x keep x (coefficients + series^2) = "
            f"{stored} values, are over this server's limit of {limits.max_stored_draws}; "
            "lower keep or chains (raise thin to keep the chains as long)"))


def check_backtest_limits(spec: BacktestCreate, n: int, T: int, limits: Settings) -> None:
    """The model limits, plus the Gibbs work of every origin's refit together."""
    check_model_limits(spec, n, T, limits)
    work, _ = gibbs_work(spec, n, T)
    if work * spec.origins > limits.max_gibbs_work:
        raise LimitExceeded("origins", (
            f"origins: refitting the Gibbs sampler at {spec.origins} origins is "
            f"{work * spec.origins:.3g} units of work, over this server's limit of "
            f"{limits.max_gibbs_work:.3g}; lower origins, keep, burn or chains"))


def check_output_limits(*, horizon: int, draws: int, n: int, limits: Settings,
                        quantiles: int = 0, horizon_field: str = "horizon",
                        horizon_what: str = "horizon") -> None:
    """Raise :class:`LimitExceeded` (422) naming the first output limit exceeded.

    ``horizon`` is the number of steps simulated; a route whose steps come from other
    fields (replenishment: start + lead_time + review_period) names them in
    ``horizon_field`` and ``horizon_what``.
    """
    _over("draws", draws, limits.max_draws, "lower draws")
    if horizon > limits.max_horizon:
        raise LimitExceeded(horizon_field, (
            f"{horizon_field}: {horizon_what} = {horizon} steps ahead is over this server's "
            f"limit of {limits.max_horizon}; ask for fewer steps"
            if horizon_what != "horizon" else
            f"horizon: {horizon} is over this server's limit of {limits.max_horizon}; "
            "lower horizon"))
    _over("quantiles", quantiles, limits.max_quantiles, "ask for fewer quantiles")
    _over(
        "draws",
        draws * horizon * n,
        limits.max_path_values,
        f"lower draws or {horizon_field} (draws x steps x series)",
    )


# ------------------------------------------------------------------- time estimates
# Seconds of one core per unit of work, measured with one BLAS thread on the reference
# machine (AMD EPYC, 2 cores; tests/benchmarks/run_cost_benchmark.py prints the
# estimated over measured seconds per workload). Rounded up: admission should refuse a
# little early rather than let work run past the timeout.
VALUE_S = 2e-7       # per simulated value (draw x step x series): draws, paths, memory
SIMULATE_S = 1e-9    # per draw x step x series x (coefficients + series)
RANGE_S = 5e-8       # per draw x sweep x range^2 (the truncated-normal Gibbs sweeps)
CONDITION_S = 2e-9   # per draw x condition x steps x series (the restriction matrix)
SHOCK_S = 1.5e-8     # per draw x step x lags x series^2 (moving-average matrices, bands)
FIT_S = 0.004        # per conjugate fit (posterior, marginal likelihood, tuning steps)
FIT_ROW_S = 3e-8     # per row x coefficients^2 of a conjugate fit
SWEEP_S = 6e-4       # per chain-sweep of a Gibbs or volatility sampler (fixed part)
SWEEP_UNIT_S = 1.2e-9  # per unit of a sweep's work (series x coefficients^2, see gibbs_work)
CALL_S = 0.002       # fixed cost of a call (set-up, answer)


@dataclass(frozen=True)
class Shape:
    """The size of a fitted model: ``n`` series, ``lags``, ``k`` coefficients per
    equation (deterministic terms + n x lags)."""

    n: int
    lags: int
    k: int

    @classmethod
    def of(cls, n: int, lags: int, terms: int) -> Shape:
        return cls(n, lags, terms + n * lags)

    @classmethod
    def of_model(cls, model: Any) -> Shape:
        """The shape of a fitted :class:`priors.FanfoldVAR`."""
        design = model.design_
        return cls(design.n, design.lags, design.X.shape[1])


def forecast_seconds(shape: Shape, *, draws: int, horizon: int) -> float:
    """Simulating ``draws`` paths of ``horizon`` steps (and their quantiles)."""
    values = draws * horizon * shape.n
    return CALL_S + values * (VALUE_S + SIMULATE_S * (shape.k + shape.n))


def scenario_seconds(shape: Shape, *, draws: int, horizon: int, conditions: int,
                     ranges: int, sweeps: int) -> float:
    """A conditional forecast: the baseline and conditional paths, the restriction
    matrix, and ``sweeps`` Gibbs sweeps over the ``ranges`` per draw."""
    sweeps_s = RANGE_S * draws * (sweeps if ranges else 0) * ranges * ranges
    return (2 * forecast_seconds(shape, draws=draws, horizon=horizon) + sweeps_s
            + CONDITION_S * draws * conditions * horizon * shape.n * (1 + conditions))


def shocks_seconds(shape: Shape, *, draws: int, horizon: int) -> float:
    """Impulse responses (or variance shares) of ``draws`` posterior draws."""
    return CALL_S + SHOCK_S * draws * (horizon + 1) * max(shape.lags, 1) * shape.n ** 2


def fit_seconds(spec: ModelSettings, n: int, T: int) -> float:
    """Fitting ``spec`` to T rows of n series: the Gibbs (or volatility) sampler's work,
    or the conjugate fits of the automatic configuration."""
    p, m = lags_and_terms(spec)
    k = n * p + m
    if spec.uses_gibbs:
        sweeps = spec.chains * (spec.burn + spec.keep * spec.thin)
        return CALL_S + sweeps * (SWEEP_S + SWEEP_UNIT_S * _sweep_units(spec, n, k, T))
    return CALL_S + _fits(spec, n, p) * (FIT_S + FIT_ROW_S * T * k * k)


class Admission:
    """Admission of one request's work: refuse what cannot finish in time, charge the
    rate limit by the estimated seconds. Built by the route (it knows the caller)."""

    def __init__(self, settings: Settings, limiter: Any = None, tenant: str = "") -> None:
        self.settings = settings
        self.limiter = limiter
        self.tenant = tenant

    def admit(self, seconds: float, field: str, advice: str) -> None:
        """Raise :class:`LimitExceeded` on ``field`` if ``seconds`` (estimated, before
        ``cost_scale``) would run past the request timeout; else take the extra rate-limit
        tokens the work costs (one per ``rate_limit_token_s`` beyond the request's own,
        at most the burst), answering 429 when the caller has not got them."""
        s = self.settings
        estimate = seconds * s.cost_scale
        if estimate > s.request_timeout_s:
            raise LimitExceeded(field, (
                f"{field}: this request would take about {estimate:.3g} s on this server, "
                f"over its request timeout of {s.request_timeout_s:g} s; {advice}"))
        if self.limiter is None or s.rate_limit_token_s <= 0:
            return
        extra = min(math.floor(estimate / s.rate_limit_token_s), s.rate_limit_burst - 1)
        if extra >= 1:
            from ..ratelimit import charge

            charge(self.limiter, self.tenant, float(extra))


def admit_forecast(admission: Admission | None, model: Any, *, draws: int, horizon: int,
                   field: str = "draws") -> None:
    """Admit simulating ``draws`` paths of ``horizon`` steps from ``model``."""
    if admission is not None:
        admission.admit(forecast_seconds(Shape.of_model(model), draws=draws, horizon=horizon),
                        field, "lower draws or horizon, or ask for fewer steps")
