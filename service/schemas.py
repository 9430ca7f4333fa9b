"""Request and response bodies of the HTTP API (pydantic), with demo-scenario examples.

Inputs forbid unknown fields and non-finite numbers. The static bounds below are the
defaults of :class:`service.config.Settings`; the configured values are enforced per
request as well (:mod:`service.compute.limits`).
"""

from __future__ import annotations

import datetime as dt
import typing
from typing import Annotated, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    ValidationInfo,
    field_validator,
    model_validator,
)

from priors.transforms import TRANSFORMS

__all__ = [
    "FanChartPublic",
    "BacktestCreate",
    "ForecastCreate",
    "ForecastPublic",
    "ForecastSettings",
    "JobPublic",
    "ModelCreate",
    "ModelForecastCreate",
    "ModelPublic",
    "ModelSettings",
    "ModelsPublic",
    "ObservationsCreate",
    "OutputSettings",
    "QuantileLevels",
    "SeriesData",
    "SeriesForecast",
    "quantile_key",
]

Number = Annotated[float, Field(allow_inf_nan=False)]
#: a data value: strict, so JSON true/false (and "3") are refused by pydantic's own
#: validator at C speed instead of a Python pass over every value
Value = Annotated[float, Field(allow_inf_nan=False, strict=True)]
Flag = Annotated[bool, Field(strict=True)]  # JSON true/false only, not 0/1
Positive = Annotated[float, Field(gt=0, allow_inf_nan=False)]
Transform = Literal["none", "log", "log1p", "diff", "logdiff"]
assert set(Transform.__args__) == set(TRANSFORMS)  # type: ignore[attr-defined]

_DEMO = {
    "tyres": [1256, 1279, 1329, 1236, 1355, 1499, 1510, 1366, 1321, 1334, 1182, 1081,
              1136, 1235, 1200, 1327, 1344, 1519, 1581, 1469, 1316, 1222, 1096, 1209,
              1114, 1140, 1294, 1181, 1228, 1405, 1421, 1389, 1340, 1127, 994, 1063],
    "inner_tubes": [1986, 2074, 2216, 2364, 2342, 2408, 2654, 2514, 2462, 2415, 2196, 2099,
                    2089, 2141, 2107, 2120, 2171, 2382, 2492, 2484, 2535, 2399, 2208, 2071,
                    1916, 1819, 2042, 1920, 1969, 1965, 2153, 2471, 2369, 2171, 2051, 1993],
}


def quantile_key(level: float) -> str:
    """Name of a quantile level in JSON: ``format(level, "g")`` (6 significant digits),
    e.g. "0.05"."""
    return format(float(level), "g")


def _distinct_levels(levels: list[float]) -> list[float]:
    """Quantile levels increasing, with no repeats, and distinct in their JSON names
    (0.1 and 0.10000004 would both be "0.1")."""
    if any(b <= a for a, b in zip(levels, levels[1:], strict=False)):
        raise ValueError("quantile levels must be increasing with no repeats")
    keys = [quantile_key(q) for q in levels]
    for (a, ka), (b, kb) in zip(zip(levels, keys, strict=True),
                                zip(levels[1:], keys[1:], strict=True), strict=False):
        if ka == kb:
            raise ValueError(f"quantile levels {a!r} and {b!r} are both named {ka!r} at 6 "
                             "significant digits; give levels that differ within them")
    return levels


#: quantile levels of a request: each in (0, 1), increasing, distinct in their names
QuantileLevels = Annotated[
    list[Annotated[float, Field(gt=0, lt=1)]],
    Field(min_length=1, max_length=25),
    AfterValidator(_distinct_levels),
]

Seed = Annotated[int | None, Field(ge=0, lt=2**63)]
_SEED_HELP = "default: a fresh seed"


def _allows_bool(annotation: object) -> bool:
    """Whether a field's type admits true/false (bool anywhere in it)."""
    if annotation is bool:
        return True
    return any(_allows_bool(a) for a in typing.get_args(annotation))


def _has_bool(value: object) -> bool:
    if isinstance(value, bool):
        return True
    if isinstance(value, list):
        return any(isinstance(x, bool) for x in value)
    if isinstance(value, dict):
        return any(_has_bool(x) for x in value.values())
    return False


class Input(BaseModel):
    """Base of request bodies: JSON true/false is refused where a number is expected
    (pydantic's lax mode would read it as 1/0; query strings still convert "3" to 3).

    The data values themselves are typed :data:`Value` (strict) and skipped here: this
    check is a Python pass over the value, measured at 0.1 ms per 360 data values."""

    @field_validator("*", mode="before")
    @classmethod
    def _no_booleans_for_numbers(cls, value: object, info: ValidationInfo) -> object:
        if info.field_name and info.field_name != "series" and _has_bool(value):
            field = cls.model_fields[info.field_name]
            if not _allows_bool(field.annotation):
                raise ValueError("expected a number (or text), not true/false")
        return value


class OutlierPeriod(Input):
    """A known-date period with its own shock scale."""

    model_config = ConfigDict(extra="forbid")

    start: dt.date = Field(description="first period (a date of the data)")
    periods: int = Field(1, ge=1, le=24, description="number of periods")


class ModelSettings(Input):
    """How the model is built: lags, prior, transforms, deterministic terms, and for the
    independent prior the Gibbs sampler's settings."""

    model_config = ConfigDict(extra="forbid")

    lags: int | Literal["auto"] = Field(
        "auto", description="lag order, or 'auto' to choose it by marginal likelihood")
    max_lags: int | None = Field(None, ge=1, le=13, description="largest order for 'auto'")
    prior: Literal["minnesota", "flat", "independent"] = Field(
        "minnesota", description="'minnesota': natural-conjugate, exact posterior; "
        "'independent': the full Minnesota pattern (own and other series' lags shrunk "
        "separately, see cross), sampled by Gibbs; 'flat': OLS-like")
    tightness: Positive | Literal["auto"] = Field(
        "auto", description="prior s.d. of own first lags, or 'auto' (marginal likelihood)")
    cross: float = Field(
        1.0, gt=0, le=10, allow_inf_nan=False,
        description="other series' lags get prior s.d. cross x own lags (e.g. 0.5: how "
        "many inner tubes sell says less about tyres than tyre sales do); independent "
        "prior only")
    chains: int = Field(4, ge=1, le=16, description="Gibbs chains (independent prior)")
    burn: int = Field(500, ge=0, le=20_000,
                      description="sweeps discarded per chain (independent prior)")
    keep: int = Field(1000, ge=10, le=20_000,
                      description="draws kept per chain (independent prior)")
    thin: int = Field(1, ge=1, le=100,
                      description="sweeps per kept draw (independent prior)")
    seed: Seed = Field(None, description="seed of the Gibbs chains (independent prior or "
                       f"stochastic volatility); {_SEED_HELP}, recorded in the stored "
                       "model's settings")
    volatility: Literal["constant", "common"] = Field(
        "constant", description="'common': one stochastic volatility for all series "
        "(calm and turbulent periods), sampled by Gibbs; minnesota prior only")
    outliers: list[OutlierPeriod] | None = Field(
        None, max_length=50, description="known-date periods (a promotion, a stock-out, a "
        "supply shock) whose shocks get their own estimated scale; independent prior only")
    sample_hyper: Flag = Field(
        False, description="sample tightness and cross tightness inside the Gibbs loop "
        "(independent prior only; slower)")
    decay: float = Field(1.0, ge=0, le=10, description="prior s.d. of lag l ~ 1 / l**decay")
    sum_coef: Positive | Literal["auto"] | None = Field(
        "auto", description="sum-of-coefficients weight (smaller = tighter); null = off; "
        "'auto': used if it raises the marginal likelihood, weight tuned")
    initial: Positive | Literal["auto"] | None = Field(
        "auto", description="dummy-initial-observation weight; null = off; 'auto' as for "
        "sum_coef")
    season_scale: Positive | Literal["auto"] | None = Field(
        "auto", description="prior s.d. of seasonal-dummy coefficients (in residual s.d. "
        "per unit of the dummy's root mean square); 'auto': tuned; null: nearly flat")
    hyperprior: Flag = Field(True, description="tune under the Gamma hyperpriors of "
                             "Giannone, Lenza & Primiceri (2015)")
    transforms: Literal["auto"] | Transform | dict[str, Transform] | None = Field(
        "auto", description="one transform for all series or one per series name; 'auto': "
        "each series' levels or log (log1p with zeros) by marginal likelihood; null: levels")
    seasonal: Flag | Literal["auto"] = Field(
        "auto", description="seasonal dummies by the data's frequency; 'auto': by marginal "
        "likelihood")
    trend: Flag = False
    constant: Flag = True
    counts: Flag | Literal["auto"] = Field(
        "auto", description="count-aware demand: forecasts of count series are censored at "
        "zero and their reorder points and orders are whole units; 'auto': on for series "
        "whose values are all whole numbers >= 0")

    @field_validator("lags")
    @classmethod
    def _lags(cls, v: int | str) -> int | str:
        if isinstance(v, int) and not 1 <= v <= 13:
            raise ValueError("lags must be 'auto' or an integer from 1 to 13")
        return v

    @field_validator("transforms", mode="before")
    @classmethod
    def _transforms(cls, v: object) -> object:
        # query-string form: "tyres=log,chains=diff"
        if isinstance(v, str) and "=" in v:
            pairs = (item.partition("=") for item in v.split(","))
            return {k.strip(): t.strip() for k, _, t in pairs}
        return v

    @model_validator(mode="after")
    def _cross_needs_independent(self) -> ModelSettings:
        if self.cross != 1.0 and self.prior != "independent":
            raise ValueError(f"cross = {self.cross:g} needs prior 'independent': the "
                             f"{self.prior} prior shrinks own and other series' lags alike")
        if self.outliers and self.prior != "independent":
            raise ValueError("outliers need prior 'independent' (their scales are sampled)")
        if self.sample_hyper and self.prior != "independent":
            raise ValueError("sample_hyper needs prior 'independent'")
        if self.volatility == "common" and self.prior != "minnesota":
            raise ValueError("volatility 'common' is built for prior 'minnesota'")
        return self

    @property
    def uses_gibbs(self) -> bool:
        """Whether the fit runs the Gibbs sampler (and stores draws)."""
        return self.prior == "independent" or self.volatility == "common"


class OutputSettings(Input):
    """What to simulate and report: horizon, draws, quantiles, seed."""

    model_config = ConfigDict(extra="forbid")

    horizon: int = Field(12, ge=1, le=104, description="periods ahead")
    quantiles: QuantileLevels = [0.05, 0.5, 0.95]
    draws: int = Field(2000, ge=1, le=10_000, description="simulated paths")
    seed: Seed = Field(None, description=_SEED_HELP)
    cumulative: Flag = Field(False, description="running totals over steps 1..horizon")
    reject_explosive: Flag = False
    lead_time: int | None = Field(
        None, ge=1, le=104, description="also report each series' total over the first "
        "lead_time periods (lead-time demand), path by path")


class ForecastSettings(ModelSettings, OutputSettings):
    """Model and output settings of a one-shot forecast (query parameters for CSV)."""

    model_config = ConfigDict(extra="forbid")

    seed: Seed = Field(None, description="seed of the forecast draws and of the Gibbs "
                       f"chains (independent prior); {_SEED_HELP}")


class SeriesData(Input):
    """The series and their dates: explicit ``dates``, or ``start`` and ``frequency``."""

    model_config = ConfigDict(extra="forbid")

    series: dict[Annotated[str, Field(min_length=1, max_length=100)],
                 Annotated[list[Value | None], Field(min_length=3)]] = Field(
        ..., min_length=1, description="values per series name, oldest first, equal lengths; "
        "null only in the last periods for values not known yet (forecasts then start at "
        "the first incomplete period, conditioned on the known values)")
    start: dt.date | None = Field(None, description="date of the first value")
    frequency: str | None = Field(
        None, description="pandas frequency of the dates, e.g. MS (month start), QS, W, D")
    dates: list[dt.date] | None = Field(None, description="explicit dates instead")


class ForecastCreate(SeriesData, ForecastSettings):
    """A one-shot forecast request: the series and the settings."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{
        "series": _DEMO, "start": "2016-01-01", "frequency": "MS", "horizon": 6,
        "quantiles": [0.05, 0.5, 0.95], "draws": 1000, "seed": 7,
    }]})


class ModelCreate(SeriesData, ModelSettings):
    """Fit and store a model."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{
        "name": "bike parts, monthly", "series": _DEMO, "start": "2016-01-01",
        "frequency": "MS", "seasonal": True,
    }, {
        "name": "bike parts, cross-effects shrunk", "series": _DEMO, "start": "2016-01-01",
        "frequency": "MS", "lags": 2, "prior": "independent", "cross": 0.5, "chains": 4,
        "burn": 500, "keep": 1000, "seed": 7,
    }]})

    name: str | None = Field(None, max_length=200, description="a label for people")

    @field_validator("name")
    @classmethod
    def _name_storable(cls, v: str | None) -> str | None:
        # PostgreSQL text cannot hold U+0000 (it was a 500 there and stored on SQLite)
        if v is not None and "\x00" in v:
            raise ValueError("name must not contain the NUL character (U+0000)")
        return v


class ObservationsCreate(SeriesData):
    """New periods for a stored model: every series, continuing right after its data.
    Without ``start``/``frequency``/``dates`` they continue the model's own calendar (the
    usual case: post each period as it closes)."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{
        "series": {"tyres": [1190, 1240], "inner_tubes": [2010, 2105]},
        "start": "2026-01-01", "frequency": "MS"}]})

    series: dict[Annotated[str, Field(min_length=1, max_length=100)],
                 Annotated[list[Value | None], Field(min_length=1)]] = Field(
        ..., min_length=1, description="values per series name for the new periods, oldest "
        "first, equal lengths (one period is fine); null only in the last periods for "
        "values not known yet")

class BacktestCreate(SeriesData, ModelSettings):
    """A rolling-origin backtest, run as a job."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{
        "series": _DEMO, "start": "2016-01-01", "frequency": "MS", "lags": 1,
        "origins": 6, "horizon": 3, "draws": 500, "period": 12, "seed": 1}]})

    prior: Literal["minnesota", "flat", "independent"] = Field(
        "minnesota", description="as for models; 'independent' (and volatility 'common') "
        "run the Gibbs sampler again at every origin, limited to max_gibbs_work in all")
    origins: int = Field(24, ge=1, le=200, description="forecast origins (the last ones)")
    horizon: int = Field(12, ge=1, le=104, description="steps ahead")
    window: int | None = Field(None, ge=10, description="fit on the last N periods only")
    draws: int = Field(1000, ge=10, le=5_000, description="simulated paths per origin")
    coverage: float = Field(0.9, gt=0, lt=1, description="central interval to score")
    period: int | None = Field(None, ge=2, le=366,
                               description="seasonal period for the seasonal-naive benchmark")
    seed: int = Field(0, ge=0, lt=2**63)


class ModelForecastCreate(OutputSettings):
    """Forecast from a stored model (no refit)."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{
        "horizon": 6, "quantiles": [0.05, 0.5, 0.95], "draws": 1000, "seed": 7}]})


class SeriesForecast(BaseModel):
    """One series' forecast, one value per step."""

    dates: list[str]
    mean: list[float | None]
    median: list[float | None]
    quantiles: dict[str, list[float | None]]


class LeadTimeTotal(BaseModel):
    """One series' demand summed over the lead time."""

    mean: float
    median: float
    quantiles: dict[str, float]


class ConfigurationPublic(BaseModel):
    """What the automatic configuration chose and why (settings left at 'auto')."""

    chosen: list[str] = Field(description="the settings that were chosen ('auto')")
    seasonal: bool
    transforms: dict[str, str]
    lags: int
    summary: str = Field(description="the configuration in one line")
    reasons: list[str] = Field(description="one plain sentence per choice")
    weights: dict[str, float] = Field(
        description="posterior probabilities of the structures compared (equal prior odds)")


class ForecastPublic(BaseModel):
    """The one-shot forecast answer (the CLI's ``forecast --json`` has the same layout)."""

    forecasts: dict[str, SeriesForecast]
    configuration: ConfigurationPublic | None = Field(
        None, description="what the automatic configuration chose and why")
    lags: int
    hyperparameters: dict[str, float | None]
    log_marginal_likelihood: float | None
    log_marginal_likelihood_note: str | None = Field(
        None, description="why log_marginal_likelihood is null (flat prior, Gibbs sampler)")
    seed: int
    draws: int
    horizon: int
    rejected_explosive_share: float | None
    convergence: dict[str, object] | None = Field(
        None, description="sampled models: worst R-hat, smallest bulk and tail ESS, ok, "
        "messages and thresholds of the chains (null for exact samplers)")
    warnings: list[str] = Field(
        default_factory=list, description="plain-words warnings, e.g. chains that have not "
        "converged: do not trust the numbers then")
    cumulative: bool
    lead_time_totals: dict[str, LeadTimeTotal] | None = Field(
        None, description="with lead_time: mean, median and quantiles of each series' "
        "total over the lead time")


class Coefficient(BaseModel):
    equation: str
    regressor: str
    mean: float | None
    sd: float | None
    lower: float | None
    upper: float | None


class Span(BaseModel):
    start: str
    end: str
    observations: int


class ModelPublic(BaseModel):
    """A stored model: settings, data span, chosen hyperparameters and the posterior."""

    id: str
    name: str | None
    status: str
    created_at: dt.datetime
    updated_at: dt.datetime
    version: int
    series: list[str]
    settings: dict[str, object]
    configuration: ConfigurationPublic | None = Field(
        None, description="what the automatic configuration chose and why")
    span: Span
    lags: int
    hyperparameters: dict[str, float | None]
    log_marginal_likelihood: float | None
    log_marginal_likelihood_note: str | None = Field(
        None, description="why log_marginal_likelihood is null (flat prior, Gibbs sampler)")
    coefficients: list[Coefficient]
    sigma: dict[str, object]
    diagnostics: dict[str, object] | None = Field(
        description="Gibbs convergence (independent prior, two or more chains): "
        "worst_r_hat, min_ess_bulk, min_ess_tail, ok, messages (what failed and what to "
        "do) and thresholds; null for exact samplers")
    warnings: list[str] = Field(
        default_factory=list, description="plain-words warnings, e.g. chains that have not "
        "converged (see diagnostics): do not trust the model's numbers then")


class ModelSummary(BaseModel):
    """A stored model in a list."""

    id: str
    name: str | None
    status: str
    created_at: dt.datetime
    version: int
    series: list[str]
    lags: int


class ModelsPublic(BaseModel):
    """A page of models; ``next`` is the cursor of the following page (or null)."""

    data: list[ModelSummary]
    next: str | None


class Band(BaseModel):
    lower: list[float | None]
    upper: list[float | None]


class FanChartPublic(BaseModel):
    """What a dashboard needs to draw nested bands after the history."""

    model_id: str
    version: int
    history: dict[str, object]
    dates: list[str]
    median: dict[str, list[float | None]]
    bands: dict[str, dict[str, Band]]


class JobPublic(BaseModel):
    """A background job. ``result`` links the model once ``status`` is succeeded;
    ``problem`` is an RFC 9457 document once it failed."""

    id: str
    kind: str
    status: Literal["queued", "running", "succeeded", "failed", "cancelled"]
    progress: float
    attempts: int
    created_at: dt.datetime
    updated_at: dt.datetime
    result: str | None
    problem: dict[str, object] | None
