"""Request and response bodies of the planning endpoints: scenarios, shock propagation,
variance shares and replenishment (pydantic, with demo-scenario examples)."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from .schemas import (
    Flag,
    Input,
    LeadTimeTotal,
    Number,
    OutputSettings,
    QuantileLevels,
    SeriesForecast,
)

__all__ = [
    "AlertIn",
    "ConditionIn",
    "ReplenishmentCreate",
    "ReplenishmentItem",
    "ReplenishmentPublic",
    "ScenarioCreate",
    "ScenarioPublic",
    "ShocksPublic",
    "SharesPublic",
]

Probability = Annotated[float, Field(gt=0, lt=1)]
Stock = Annotated[float, Field(ge=0, allow_inf_nan=False)]
SeriesName = Annotated[str, Field(min_length=1, max_length=100)]


class ConditionIn(Input):
    """A fixed value or a range for one series in one forecast period, in the series'
    own units. Give ``step`` (1 = first forecast period) or ``date``; give ``value``, or
    ``lower`` and/or ``upper``."""

    model_config = ConfigDict(extra="forbid")

    series: SeriesName
    step: int | None = Field(None, ge=1, le=104)
    date: dt.date | None = None
    value: Number | None = None
    lower: Number | None = None
    upper: Number | None = None

    @model_validator(mode="after")
    def _one_of_each(self) -> ConditionIn:
        if (self.step is None) == (self.date is None):
            raise ValueError("give either step or date")
        if self.value is not None and (self.lower is not None or self.upper is not None):
            raise ValueError("give a value or a range (lower/upper), not both")
        if self.value is None and self.lower is None and self.upper is None:
            raise ValueError("give a value, or lower and/or upper")
        return self


class ScenarioCreate(OutputSettings):
    """A conditional forecast from a stored model."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{
        "horizon": 6, "seed": 7, "draws": 2000,
        "conditions": [
            {"series": "tyres", "step": 1, "value": 1300},
            {"series": "tyres", "step": 2, "value": 1450},
            {"series": "chains", "date": "2026-03-01", "lower": 500, "upper": 560}]}]})

    conditions: list[ConditionIn] = Field(..., max_length=500)
    sweeps: int = Field(25, ge=1, le=500,
                        description="Gibbs sweeps per draw for ranges (ignored without)")


class ConditionOut(BaseModel):
    series: str
    date: str
    step: int
    kind: Literal["known", "value", "range"]
    lower: float | None
    upper: float | None
    prior_probability: float | None = Field(
        description="range: probability the forecast met it before conditioning; value: "
                    "its percentile in the unconditional forecast")


class ScenarioPublic(BaseModel):
    """The conditional forecast, the unconditional baseline on the same draws, and how
    likely each condition was beforehand."""

    forecasts: dict[str, SeriesForecast]
    baseline: dict[str, SeriesForecast]
    conditions: list[ConditionOut]
    ranges_probability: float = Field(
        description="share of draws meeting all ranges at once before they were imposed")
    known_periods: int = Field(description="leading periods that are incomplete data")
    sweeps: int
    seed: int
    draws: int
    horizon: int
    cumulative: bool
    lead_time_totals: dict[str, LeadTimeTotal] | None = Field(
        None, description="with lead_time: each series' total over the lead time, given "
                          "the conditions")


class Band(BaseModel):
    lower: list[float | None]
    upper: list[float | None]


class Pointwise(BaseModel):
    median: list[float | None]
    bands: dict[str, Band]


class ShocksPublic(BaseModel):
    """Impulse responses: ``responses[shock][series]``, steps 0 (impact) .. horizon."""

    model_id: str
    version: int
    identification: Literal["recursive", "generalised"]
    shock_size: Literal["sd", "unit"]
    cumulative: bool
    ordering: list[str] | None
    steps: list[int]
    units: dict[str, str]
    responses: dict[str, dict[str, Pointwise]]
    draws: int
    seed: int


class SharesPublic(BaseModel):
    """Variance decomposition: ``shares[series][shock]`` for steps 1..horizon."""

    model_id: str
    version: int
    identification: Literal["recursive", "generalised"]
    ordering: list[str] | None
    steps: list[int]
    shares: dict[str, dict[str, Pointwise]]
    draws: int
    seed: int


class ReplenishmentItem(Input):
    """One stocked item: a series, or the sum of several (e.g. a kit), with its stock and
    the target: a cycle service level, or a fill rate with the order quantity."""

    model_config = ConfigDict(extra="forbid")

    series: SeriesName | Annotated[list[SeriesName], Field(min_length=1, max_length=100)] = (
        Field(..., description="a series name, or several names whose demand is added"))
    name: str | None = Field(None, max_length=100, description="label (default: the series)")
    on_hand: Stock
    on_order: Stock = 0.0
    backorders: Stock = 0.0
    service_level: Probability | None = Field(
        None, description="probability of no stock-out in a cycle (e.g. 0.95)")
    fill_rate: Probability | None = Field(
        None, description="share of demand met from stock (needs order_quantity)")
    order_quantity: Annotated[float, Field(gt=0, allow_inf_nan=False)] | None = None

    @model_validator(mode="after")
    def _target(self) -> ReplenishmentItem:
        if (self.service_level is None) == (self.fill_rate is None):
            raise ValueError("give exactly one of service_level and fill_rate")
        if self.fill_rate is not None and self.order_quantity is None:
            raise ValueError("a fill_rate target needs the order_quantity")
        return self


class AlertIn(Input):
    """Probability that a series goes above (or below) a threshold in the window."""

    model_config = ConfigDict(extra="forbid")

    series: SeriesName
    threshold: Number
    below: Flag = False


class ReplenishmentCreate(Input):
    """Lead-time demand, reorder points and alerts from a stored model."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{
        "lead_time": 3, "seed": 7,
        "items": [
            {"series": "tyres", "on_hand": 2100, "on_order": 900, "service_level": 0.95},
            {"series": "inner_tubes", "on_hand": 4000, "fill_rate": 0.98,
             "order_quantity": 2500}],
        "alerts": [{"series": "brake_pads", "threshold": 1000}]}]})

    lead_time: int = Field(..., ge=1, le=104, description="periods until an order arrives")
    review_period: int = Field(0, ge=0, le=104,
                               description="periods between reviews (periodic review)")
    start: int = Field(1, ge=1, le=104, description="first period of the demand window "
                       "(1 = the next period); the window has lead_time + review_period "
                       "periods")
    items: list[ReplenishmentItem] = Field(default_factory=list, max_length=200)
    alerts: list[AlertIn] = Field(default_factory=list, max_length=200)
    quantiles: QuantileLevels = [0.05, 0.5, 0.95]
    draws: int = Field(4000, ge=100, le=10_000, description="simulated paths")
    seed: int | None = Field(None, ge=0, lt=2**63, description="default: a fresh seed")

    @model_validator(mode="after")
    def _something(self) -> ReplenishmentCreate:
        if not self.items and not self.alerts:
            raise ValueError("give at least one item or alert")
        return self


class ItemAdvice(BaseModel):
    name: str
    series: list[str]
    target: Literal["service_level", "fill_rate"]
    target_value: float
    mean_demand: float
    demand_quantiles: dict[str, float]
    reorder_point: float
    safety_stock: float
    inventory_position: float
    suggested_order: float
    stockout_probability: float
    expected_shortage: float
    cycle_service_level: float
    fill_rate: float | None


class AlertOut(BaseModel):
    series: str
    threshold: float
    below: bool
    dates: list[str]
    probability: list[float]
    any_step: float


class ReplenishmentPublic(BaseModel):
    """Advice per item over the window (steps 1..lead_time + review_period)."""

    window: dict[str, object]
    items: list[ItemAdvice]
    alerts: list[AlertOut]
    seed: int
    draws: int
