"""Planning answers shared by the HTTP API and the CLI: scenarios, shock propagation,
variance shares, lead-time demand and reorder points.

Each function takes a fitted model and a request body, checks this server's limits,
runs the numerics in :mod:`priors` and returns a JSON-ready dict in the layout of the
matching response model in :mod:`service.plan_schemas`.
"""

from __future__ import annotations

import secrets
from collections.abc import Sequence
from typing import Any

import numpy as np

from priors import FanfoldVAR, Forecast
from priors.errors import DateRangeError, SpecificationError
from priors.inventory import (
    exceedance_probabilities,
    replenishment_advice,
    window_totals,
)
from priors.propagation import ShockResponses, VarianceShares

from ..config import Settings
from ..plan_schemas import ReplenishmentCreate, ScenarioCreate
from ..serialization import _nums, forecast_to_dict, quantile_key
from .engine import lead_time_totals
from .limits import (
    Admission,
    Shape,
    admit_forecast,
    check_output_limits,
    scenario_seconds,
    shocks_seconds,
)

__all__ = [
    "replenishment_answer",
    "scenario_answer",
    "shares_answer",
    "shocks_answer",
]


def _seed(seed: int | None) -> int:
    return secrets.randbits(32) if seed is None else int(seed)


def scenario_answer(model: FanfoldVAR, spec: ScenarioCreate, limits: Settings, *,
                    admission: Admission | None = None) -> dict[str, Any]:
    """Conditional forecast, baseline and condition report (:class:`ScenarioPublic`)."""
    steps = spec.horizon + (0 if model.ragged_ is None else model.ragged_.values.shape[0])
    check_output_limits(horizon=steps, draws=spec.draws, quantiles=len(spec.quantiles),
                        n=model.design_.n, limits=limits)
    if admission is not None:
        ranges = sum(1 for c in spec.conditions if c.value is None)
        seconds = scenario_seconds(Shape.of_model(model), draws=spec.draws, horizon=steps,
                                   conditions=len(spec.conditions), ranges=ranges,
                                   sweeps=spec.sweeps)
        admission.admit(seconds, "sweeps" if ranges else "draws",
                        "lower draws or sweeps, or give fewer ranges")
    conds = [
        model.condition(c.series, c.step if c.step is not None else c.date.isoformat(),
                        value=c.value, lower=c.lower, upper=c.upper, horizon=spec.horizon)
        for c in spec.conditions
    ]
    seed = _seed(spec.seed)
    sc = model.scenario(spec.horizon, conds, rng=np.random.default_rng(seed), draws=spec.draws,
                        reject_explosive=spec.reject_explosive, sweeps=spec.sweeps)
    conditional, baseline = sc.forecast, sc.baseline
    totals = None
    if spec.lead_time is not None:
        totals = lead_time_totals(conditional, spec.lead_time, spec.quantiles,
                                  first=sc.known_periods + 1)
    if spec.cumulative:
        conditional, baseline = conditional.cumulative(), baseline.cumulative()
    def layout(fc: Forecast) -> dict[str, Any]:
        return forecast_to_dict(model, fc, quantiles=spec.quantiles, seed=seed,
                                draws=spec.draws)["forecasts"]
    table = sc.table()
    conditions = [
        {"series": r.series, "date": r.date, "step": int(r.step), "kind": r.kind,
         "lower": _nums(r.lower), "upper": _nums(r.upper),
         "prior_probability": _nums(r.prior_probability)}
        for r in table.itertuples()
    ]
    return {"forecasts": layout(conditional), "baseline": layout(baseline),
            "conditions": conditions, "ranges_probability": float(sc.soft_probability),
            "known_periods": int(sc.known_periods), "sweeps": int(sc.sweeps), "seed": seed,
            "draws": int(spec.draws), "horizon": int(conditional.horizon),
            "cumulative": bool(spec.cumulative), "lead_time_totals": totals}


def _pointwise(median: np.ndarray, bands: dict[float, np.ndarray], r: int, j: int
               ) -> dict[str, Any]:
    return {"median": _nums(median[:, r, j]),
            "bands": {format(c, "g"): {"lower": _nums(b[0, :, r, j]),
                                       "upper": _nums(b[1, :, r, j])}
                      for c, b in bands.items()}}


def _check_draws(model: FanfoldVAR, draws: int, horizon: int, limits: Settings,
                 admission: Admission | None) -> None:
    n = model.design_.n
    check_output_limits(horizon=horizon, draws=draws, n=n, limits=limits)
    if admission is not None:
        admission.admit(shocks_seconds(Shape.of_model(model), draws=draws, horizon=horizon),
                        "draws", "lower draws or horizon")
    if draws * (horizon + 1) * n * n > limits.max_path_values:
        raise SpecificationError(
            f"draws x steps x series^2 = {draws * (horizon + 1) * n * n} is over this "
            f"server's limit of {limits.max_path_values}; lower draws or horizon")


def shocks_answer(model: FanfoldVAR, *, horizon: int, identification: str, shock_size: str,
                  ordering: Sequence[str] | None, cumulative: bool, draws: int, seed: int,
                  bands: Sequence[float], limits: Settings,
                  admission: Admission | None = None) -> dict[str, Any]:
    """Impulse responses with pointwise bands (:class:`ShocksPublic` without the model
    id and version)."""
    _check_draws(model, draws, horizon, limits, admission)
    res: ShockResponses = model.impulse_responses(
        horizon, rng=np.random.default_rng(seed), draws=draws, identification=identification,
        shock_size=shock_size, ordering=ordering, cumulative=cumulative)
    med, bb = res.median(), res.bands(bands)
    names = res.names
    return {
        "identification": identification, "shock_size": shock_size,
        "cumulative": bool(cumulative), "ordering": None if ordering is None else list(ordering),
        "steps": list(range(horizon + 1)),
        "units": dict(zip(names, res.units, strict=True)),
        "responses": {shock: {resp: _pointwise(med, bb, r, j) for r, resp in enumerate(names)}
                      for j, shock in enumerate(names)},
        "draws": int(draws), "seed": int(seed),
    }


def shares_answer(model: FanfoldVAR, *, horizon: int, identification: str,
                  ordering: Sequence[str] | None, draws: int, seed: int,
                  bands: Sequence[float], limits: Settings,
                  admission: Admission | None = None) -> dict[str, Any]:
    """Variance decomposition with pointwise bands (:class:`SharesPublic` without the
    model id and version)."""
    _check_draws(model, draws, horizon, limits, admission)
    res: VarianceShares = model.variance_decomposition(
        horizon, rng=np.random.default_rng(seed), draws=draws, identification=identification,
        ordering=ordering)
    med, bb = res.median(), res.bands(bands)
    names = res.names
    return {
        "identification": identification,
        "ordering": None if ordering is None else list(ordering),
        "steps": list(range(1, horizon + 1)),
        "shares": {series: {shock: _pointwise(med, bb, r, j) for j, shock in enumerate(names)}
                   for r, series in enumerate(names)},
        "draws": int(draws), "seed": int(seed),
    }


def _series_index(model: FanfoldVAR, name: str) -> int:
    names = model.series_.names
    if name not in names:
        raise SpecificationError(f"unknown series {name!r}; series are {', '.join(names)}")
    return names.index(name)


def replenishment_answer(model: FanfoldVAR, spec: ReplenishmentCreate, limits: Settings, *,
                         admission: Admission | None = None) -> dict[str, Any]:
    """Reorder advice per item and alert probabilities (:class:`ReplenishmentPublic`)."""
    window = spec.lead_time + spec.review_period
    known = 0 if model.ragged_ is None else model.ragged_.values.shape[0]
    check_output_limits(horizon=spec.start - 1 + window + known, draws=spec.draws,
                        quantiles=len(spec.quantiles), n=model.design_.n, limits=limits,
                        horizon_field="lead_time",
                        horizon_what="start - 1 + lead_time + review_period"
                                     + (" + periods already known" if known else ""))
    admit_forecast(admission, model, draws=spec.draws, horizon=spec.start - 1 + window + known)
    items = []
    for item in spec.items:
        names = [item.series] if isinstance(item.series, str) else list(item.series)
        if len(set(names)) != len(names):
            raise SpecificationError(f"item {names} names a series twice")
        for nm in names:
            _series_index(model, nm)
        items.append(names)
    for alert in spec.alerts:
        _series_index(model, alert.series)
    seed = _seed(spec.seed)
    try:
        fc = model.forecast(spec.start - 1 + window, rng=np.random.default_rng(seed),
                            draws=spec.draws)
    except DateRangeError as exc:  # the window is what runs past the supported dates
        raise DateRangeError(str(exc).replace("shorten the horizon", "shorten the window"),
                             "lead_time") from exc
    start = known + spec.start
    end = start + window - 1
    out_items = []
    for item, names in zip(spec.items, items, strict=True):
        weights = np.zeros(model.series_.n)
        weights[[_series_index(model, nm) for nm in names]] = 1.0
        totals = window_totals(fc.paths, start, end, weights)
        adv = replenishment_advice(
            totals, on_hand=item.on_hand, on_order=item.on_order, backorders=item.backorders,
            service_level=item.service_level, fill_rate=item.fill_rate,
            order_quantity=item.order_quantity, levels=spec.quantiles,
            whole_units=all(model.counts_[_series_index(model, nm)] for nm in names))
        out_items.append({
            "name": item.name or "+".join(names), "series": names, "target": adv.target,
            "target_value": adv.target_value, "mean_demand": adv.mean_demand,
            "demand_quantiles": {quantile_key(q): v for q, v in
                                 zip(adv.quantile_levels, adv.demand_quantiles, strict=True)},
            "reorder_point": adv.reorder_point, "safety_stock": adv.safety_stock,
            "inventory_position": adv.inventory_position,
            "suggested_order": adv.suggested_order,
            "stockout_probability": adv.stockout_probability,
            "expected_shortage": adv.expected_shortage,
            "cycle_service_level": adv.cycle_service_level, "fill_rate": adv.fill_rate,
        })
    steps = fc.steps()[start - 1 : end]
    alerts = []
    window_paths = fc.paths[:, start - 1 : end]
    for alert in spec.alerts:
        thresholds = np.full(model.series_.n, np.nan)
        j = _series_index(model, alert.series)
        thresholds[j] = alert.threshold
        per_step, any_step = exceedance_probabilities(window_paths, thresholds,
                                                      below=alert.below)
        alerts.append({"series": alert.series, "threshold": alert.threshold,
                       "below": alert.below, "dates": steps,
                       "probability": per_step[:, j].tolist(),
                       "any_step": float(any_step[j])})
    return {"window": {"first": steps[0], "last": steps[-1], "steps": window,
                       "lead_time": spec.lead_time, "review_period": spec.review_period},
            "items": out_items, "alerts": alerts, "seed": seed, "draws": int(spec.draws)}
