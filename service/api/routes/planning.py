"""Planning from a stored model: scenarios, shock propagation, variance shares and
replenishment advice. The numerics are in :mod:`priors`; the answers in
:mod:`service.compute.planning`."""

from __future__ import annotations

import uuid
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query, Request, Response
from starlette.exceptions import HTTPException

from ...compute.planning import replenishment_answer, scenario_answer, shares_answer, shocks_answer
from ...plan_schemas import (
    ReplenishmentCreate,
    ReplenishmentPublic,
    ScenarioCreate,
    ScenarioPublic,
    SharesPublic,
    ShocksPublic,
)
from ...responses import JSONResponse
from ...store import load_fitted
from ..deps import AdmissionDep, SessionDep, SettingsDep, TenantDep
from ..json_body import JSONBodyRoute
from ._shared import (
    INVALID,
    NOT_FOUND,
    NOT_MODIFIED,
    cached_model_answer,
    parse_bands,
    row_or_404,
    timed,
)

router = APIRouter(prefix="/v1/models", tags=["planning"], route_class=JSONBodyRoute)

Identification = Annotated[Literal["recursive", "generalised"], Query(
    description="recursive: Cholesky in 'ordering'; generalised: Pesaran & Shin (1998), "
                "no ordering")]
Ordering = Annotated[str | None, Query(
    max_length=2000, description="recursive only: every series, comma-separated, in causal "
                                 "order (default: the model's order)")]
Draws = Annotated[int, Query(ge=1, le=10_000, description="posterior draws")]
Seed = Annotated[int, Query(ge=0, lt=2**63, description="fixed by default, so answers "
                                                         "(and ETags) repeat")]
Bands = Annotated[str, Query(max_length=100, description="credible bands in percent")]
Horizon = Annotated[int, Query(ge=1, le=104, description="periods after the shock")]


def _ordering(text: str | None, identification: str) -> list[str] | None:
    if text is None or not text.strip():
        return None
    if identification == "generalised":
        raise HTTPException(422, "ordering applies to recursive identification only; drop it "
                                 "for generalised responses")
    return [s.strip() for s in text.split(",")]


@router.post("/{model_id}/scenarios", response_model=ScenarioPublic,
             responses={**NOT_FOUND, **INVALID},
             summary="Conditional forecast: fix some future values or keep them in ranges",
             description="Fixed values (a sales plan, a known promotion) and ranges are in "
                         "the series' own units, by step (1 = first forecast period) or "
                         "date. The other values are drawn from their predictive "
                         "distribution given the conditions, parameter uncertainty "
                         "included. The answer has the conditional forecast, the "
                         "unconditional baseline from the same draws, and each condition's "
                         "probability before it was imposed: a value far in the tails "
                         "means the scenario is far from what the data suggest.")
async def create_scenario(model_id: uuid.UUID, body: ScenarioCreate, session: SessionDep,
                          settings: SettingsDep, tenant: TenantDep,
                          admission: AdmissionDep) -> JSONResponse:
    row = row_or_404(session, tenant, model_id)
    payload = await timed(settings, lambda: scenario_answer(load_fitted(row), body, settings,
                                                            admission=admission))
    return JSONResponse(payload)


@router.get("/{model_id}/impulse-responses", response_model=ShocksPublic,
            responses={**NOT_FOUND, **INVALID, **NOT_MODIFIED},
            summary="How a shock to one series spreads to the others (ETag, 304)",
            description="Responses of every series to a shock in each series, steps 0 "
                        "(impact) to horizon, with the pointwise posterior median and "
                        "bands. Units: the series' own units for series modelled in levels "
                        "or differences, percent for log series.")
async def impulse_responses(
    model_id: uuid.UUID, request: Request, session: SessionDep, settings: SettingsDep,
    tenant: TenantDep, admission: AdmissionDep, horizon: Horizon = 24,
    identification: Identification = "recursive", ordering: Ordering = None,
    shock_size: Annotated[Literal["sd", "unit"], Query(
        description="sd: one standard deviation; unit: own impact of 1")] = "sd",
    cumulative: Annotated[bool, Query(description="sum responses over steps")] = False,
    draws: Draws = 1000, seed: Seed = 0, bands: Bands = "68,90",
) -> Response:
    row = row_or_404(session, tenant, model_id)
    levels, order = parse_bands(bands), _ordering(ordering, identification)

    def work() -> dict[str, Any]:
        return shocks_answer(load_fitted(row), horizon=horizon, identification=identification,
                             shock_size=shock_size, ordering=order, cumulative=cumulative,
                             draws=draws, seed=seed, bands=levels, limits=settings,
                             admission=admission)

    return await cached_model_answer(request, row, settings, (
        "irf", horizon, identification, order, shock_size, cumulative, draws, seed, levels),
        work)


@router.get("/{model_id}/variance-decomposition", response_model=SharesPublic,
            responses={**NOT_FOUND, **INVALID, **NOT_MODIFIED},
            summary="Which shocks drive each series' forecast uncertainty (ETag, 304)",
            description="Share of each series' 1..horizon-step forecast error variance due "
                        "to each shock, with pointwise bands; shares sum to 1 per draw.")
async def variance_decomposition(
    model_id: uuid.UUID, request: Request, session: SessionDep, settings: SettingsDep,
    tenant: TenantDep, admission: AdmissionDep, horizon: Horizon = 24,
    identification: Identification = "recursive", ordering: Ordering = None,
    draws: Draws = 1000, seed: Seed = 0, bands: Bands = "68,90",
) -> Response:
    row = row_or_404(session, tenant, model_id)
    levels, order = parse_bands(bands), _ordering(ordering, identification)

    def work() -> dict[str, Any]:
        return shares_answer(load_fitted(row), horizon=horizon, identification=identification,
                             ordering=order, draws=draws, seed=seed, bands=levels,
                             limits=settings, admission=admission)

    return await cached_model_answer(
        request, row, settings, ("fevd", horizon, identification, order, draws, seed, levels),
        work)


@router.post("/{model_id}/replenishment", response_model=ReplenishmentPublic,
             responses={**NOT_FOUND, **INVALID},
             summary="Lead-time demand, reorder points, suggested orders and alerts",
             description="Demand over the next lead_time (+ review_period) periods, path by "
                         "path, so series added together keep their correlation. For each "
                         "item: the reorder point for a cycle service level or a fill rate, "
                         "safety stock, the order that lifts the inventory position to the "
                         "reorder point, and the chance of a stock-out before an order "
                         "placed now arrives. Alerts give the probability of crossing a "
                         "threshold per period and at any period. These are model "
                         "estimates: review them before committing purchases.")
async def replenishment(model_id: uuid.UUID, body: ReplenishmentCreate, session: SessionDep,
                        settings: SettingsDep, tenant: TenantDep,
                        admission: AdmissionDep) -> JSONResponse:
    row = row_or_404(session, tenant, model_id)
    payload = await timed(settings, lambda: replenishment_answer(
        load_fitted(row), body, settings, admission=admission))
    return JSONResponse(payload)
