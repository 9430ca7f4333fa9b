"""Stored models: fit and keep, list, read, delete, forecast, fan-chart data."""

from __future__ import annotations

import hashlib
import time
import uuid
from typing import Annotated, Any, NamedTuple

from fastapi import APIRouter, Header, Query, Request, Response
from starlette.exceptions import HTTPException

from priors import FanfoldVAR

from ...compute.engine import append_observations as append_to_model
from ...compute.engine import (
    fan_chart,
    fit_model,
    forecast_answer,
    frame_from_spec,
    stored_settings,
)
from ...compute.limits import check_model_limits, fit_seconds, gibbs_work
from ...errors import PROBLEM_JSON, problem
from ...jobs import submit_job
from ...orm import StoredModel
from ...responses import JSONResponse
from ...schemas import (
    FanChartPublic,
    ForecastPublic,
    JobPublic,
    ModelCreate,
    ModelForecastCreate,
    ModelPublic,
    ModelsPublic,
    ObservationsCreate,
)
from ...serialization import convergence_warnings, data_from_dict, summary_to_dict
from ...store import (
    BadCursor,
    commit_or_winner,
    delete_model,
    find_idempotent,
    list_models,
    load_fitted,
    model_version,
    remember_idempotent,
    replace_fitted,
    save_model,
)
from ..deps import AdmissionDep, SessionDep, SettingsDep, TenantDep
from ..json_body import JSONBodyRoute
from ._shared import (
    INVALID,
    NOT_FOUND,
    NOT_MODIFIED,
    etag_for,
    not_modified,
    parse_bands,
    row_or_404,
    timed,
)
from .jobs import job_public

router = APIRouter(prefix="/v1/models", tags=["models"], route_class=JSONBodyRoute)


class _Stamp(NamedTuple):
    """What an ETag is made of (:func:`etag_for` reads ``id`` and ``version``)."""

    id: str
    version: int


def _public(row: StoredModel, model: FanfoldVAR | None = None) -> dict[str, Any]:
    """The model resource; ``model`` is the fitted model when at hand (else restored)."""
    model = load_fitted(row) if model is None else model
    summary = summary_to_dict(model, 0.9)
    return {
        "id": row.id, "name": row.name, "status": row.status,
        "created_at": row.created_at, "updated_at": row.updated_at, "version": row.version,
        "series": list(model.design_.names), "settings": row.settings,
        "configuration": row.settings.get("configuration"),
        "span": summary["span"], "lags": row.lags,
        "hyperparameters": summary["hyperparameters"],
        "log_marginal_likelihood": summary["log_marginal_likelihood"],
        "log_marginal_likelihood_note": summary["log_marginal_likelihood_note"],
        "coefficients": summary["coefficients"], "sigma": summary["sigma"],
        "diagnostics": row.diagnostics,
        "warnings": [*model.warnings_, *convergence_warnings(row.diagnostics)],
    }


@router.post("", status_code=201, response_model=ModelPublic,
             responses={**INVALID, 202: {"model": JobPublic, "description":
                        "queued as a job (large fit, or 'Prefer: respond-async'); poll "
                        "Location"}},
             summary="Fit a model to the series and store it",
             description="Small fits answer 201 with the model. Large fits (many "
                         "coefficients, or a long Gibbs run with prior 'independent'), or "
                         "any fit sent with 'Prefer: respond-async', answer 202 with a job "
                         "to poll at Location; its progress follows the Gibbs sweeps. With "
                         "prior 'independent' the model keeps its draws, the seed that "
                         "produced them (in settings) and the chains' convergence "
                         "diagnostics. With an Idempotency-Key header, a retry of the same "
                         "request gets the original answer (and creates nothing new); the "
                         "same key with a different body is a 422.")
async def create_model(
    body: ModelCreate, request: Request, session: SessionDep, settings: SettingsDep,
    tenant: TenantDep, admission: AdmissionDep,
    idempotency_key: Annotated[str | None, Header(max_length=255)] = None,
) -> JSONResponse:
    body_sha = hashlib.sha256(await request.body()).hexdigest()
    what = "POST /v1/models"

    def replay(record: Any) -> JSONResponse:
        if record.body_sha256 != body_sha or record.method_path != what:
            return problem(422, "this Idempotency-Key was used with a different request; "
                                "use a new key for a new request", request=request)
        return JSONResponse(record.response, status_code=record.status_code,
                            headers={"Location": record.location or "",
                                     "Idempotent-Replayed": "true"})

    wants_async = "respond-async" in request.headers.get("prefer", "").lower()

    def work() -> JSONResponse:
        if idempotency_key:
            record = find_idempotent(session=session, tenant=tenant, key=idempotency_key)
            if record is not None:
                return replay(record)
        frame = frame_from_spec(body)
        check_model_limits(body, frame.shape[1], frame.shape[0], settings)
        if wants_async or _large(body, frame, settings):
            job = submit_job(session=session, tenant=tenant, kind="fit_model", spec=body,
                             max_attempts=settings.job_max_attempts, commit=False)
            status, out, location = 202, job_public(job), f"/v1/jobs/{job.id}"
        else:
            admission.admit(fit_seconds(body, frame.shape[1], frame.shape[0]),
                            gibbs_work(body, frame.shape[1])[1] or "lags",
                            "send it with 'Prefer: respond-async' to run it as a job")
            started = time.perf_counter()
            fitted = fit_model(body, frame, settings)
            request.app.state.metrics.fit.observe(time.perf_counter() - started)
            row = save_model(session=session, tenant=tenant, name=body.name,
                             params=stored_settings(fitted.model, fitted.seed), frame=frame,
                             model=fitted.model, commit=False)
            status = 201
            out = ModelPublic.model_validate(_public(row, fitted.model)).model_dump(
                mode="json")
            location = f"/v1/models/{row.id}"
        if idempotency_key:
            remember_idempotent(session=session, tenant=tenant, key=idempotency_key,
                                method_path=what, body_sha256=body_sha, status_code=status,
                                location=location, response=out)
        winner = commit_or_winner(session=session, tenant=tenant, key=idempotency_key)
        if winner is not None:  # the same key won a race: answer as the winner did
            return replay(winner)
        if status == 202:
            request.app.state.jobs.wake()
            return JSONResponse(out, status_code=202,
                                headers={"Location": location, "Retry-After": "1"})
        return JSONResponse(out, status_code=201, headers={"Location": location})

    return await timed(settings, work)


def _large(spec: ModelCreate, frame: Any, settings: Any) -> bool:
    """Whether a fit is big enough to run as a job: coefficients of the largest order,
    the Gibbs sampler's work, or an estimated time over half the request timeout."""
    T, n = frame.shape
    p = spec.lags if isinstance(spec.lags, int) else (spec.max_lags or 13)
    return (n * (n * p + 1) > settings.sync_max_coefficients
            or gibbs_work(spec, n, T)[0] > settings.sync_max_gibbs_work
            or fit_seconds(spec, n, T) * settings.cost_scale > settings.request_timeout_s / 2)


@router.get("", response_model=ModelsPublic, summary="List stored models (oldest first)",
            responses={400: {"description": "bad cursor", "content": {PROBLEM_JSON: {}}}})
def list_stored(request: Request, response: Response, session: SessionDep, tenant: TenantDep,
                limit: Annotated[int, Query(ge=1, le=100)] = 20,
                cursor: Annotated[str | None, Query(max_length=200)] = None) -> dict[str, Any]:
    try:
        rows, nxt = list_models(session=session, tenant=tenant, limit=limit, cursor=cursor)
    except BadCursor as exc:
        raise HTTPException(400, str(exc)) from None
    if nxt:
        response.headers["Link"] = f'</v1/models?limit={limit}&cursor={nxt}>; rel="next"'
    data = [{"id": r.id, "name": r.name, "status": r.status, "created_at": r.created_at,
             "version": r.version, "series": list(r.data["series"]), "lags": r.lags}
            for r in rows]
    return {"data": data, "next": nxt}


@router.get("/{model_id}", response_model=ModelPublic, responses=NOT_FOUND,
            summary="A stored model: settings, data span, hyperparameters, coefficients")
def read_model(model_id: uuid.UUID, session: SessionDep, tenant: TenantDep) -> dict[str, Any]:
    return _public(row_or_404(session, tenant, model_id))


@router.delete("/{model_id}", status_code=204, responses=NOT_FOUND,
               summary="Delete a stored model")
def remove_model(model_id: uuid.UUID, session: SessionDep, tenant: TenantDep) -> Response:
    if not delete_model(session=session, tenant=tenant, model_id=str(model_id)):
        raise HTTPException(404, f"model {model_id} not found")
    return Response(status_code=204)


@router.post("/{model_id}/forecasts", response_model=ForecastPublic,
             responses={**NOT_FOUND, **INVALID},
             summary="Forecast from a stored model without refitting")
async def forecast_stored(model_id: uuid.UUID, body: ModelForecastCreate, session: SessionDep,
                          settings: SettingsDep, tenant: TenantDep,
                          admission: AdmissionDep) -> JSONResponse:
    row = row_or_404(session, tenant, model_id)
    payload = await timed(settings, lambda: forecast_answer(
        load_fitted(row), body, settings, admission=admission, convergence=row.diagnostics))
    return JSONResponse(payload)


@router.get("/{model_id}/fan-chart", response_model=FanChartPublic,
            responses={**NOT_FOUND, **INVALID,
                       **NOT_MODIFIED},
            summary="Nested bands and history for a dashboard (ETag, 304 when unchanged)")
async def fan_chart_data(
    model_id: uuid.UUID, request: Request, session: SessionDep, settings: SettingsDep,
    tenant: TenantDep, admission: AdmissionDep,
    horizon: Annotated[int, Query(ge=1, le=104)] = 12,
    bands: Annotated[str, Query(max_length=100, description="coverages in percent")] = "50,80,95",
    draws: Annotated[int, Query(ge=1, le=10_000)] = 2000,
    seed: Annotated[int, Query(ge=0, lt=2**63)] = 0,
    history: Annotated[int, Query(ge=0, le=10_000, description="past periods")] = 24,
) -> Response:
    levels = parse_bands(bands)
    key = (horizon, levels, draws, seed, history)
    if request.headers.get("if-none-match"):  # a poll: the version decides, no row read
        version = model_version(session=session, tenant=tenant, model_id=str(model_id))
        if version is not None:
            etag, headers = etag_for(_Stamp(str(model_id), version), *key)
            if not_modified(request, etag):
                return Response(status_code=304, headers=headers)
    row = row_or_404(session, tenant, model_id)
    etag, headers = etag_for(row, *key)  # of the row answered (it may have changed)
    if not_modified(request, etag):
        return Response(status_code=304, headers=headers)
    chart = await timed(settings, lambda: fan_chart(
        load_fitted(row), horizon=horizon, bands=levels, draws=draws, seed=seed,
        history=history, limits=settings, admission=admission))
    return JSONResponse({"model_id": row.id, "version": row.version, **chart},
                        headers=headers)


@router.post("/{model_id}/observations", response_model=ModelPublic,
             responses={**NOT_FOUND, **INVALID, 202: {
                 "model": JobPublic, "description": "prior 'independent': queued as a job "
                 "that reruns the Gibbs chains on all the data and then replaces the model "
                 "(version + 1); poll Location"}},
             summary="Append new periods to a stored model",
             description="Conjugate priors ('minnesota', 'flat'): the posterior is updated "
                         "exactly, no refit, and the answer is the updated model (200). "
                         "Prior 'independent' has no exact update: the answer is 202 with "
                         "a job (kind 'update_model') that reruns the Gibbs chains on all "
                         "the data from the model's stored seed and then replaces the model "
                         "(version + 1); if the model changes before the job runs, the job "
                         "fails with a 409 problem. Either way the lags and hyperparameters "
                         "stay as fitted.")
async def append_observations(model_id: uuid.UUID, body: ObservationsCreate,
                              request: Request, session: SessionDep,
                              settings: SettingsDep, tenant: TenantDep) -> Any:
    row = row_or_404(session, tenant, model_id)

    def work() -> Any:
        new = frame_from_spec(body)
        old = data_from_dict(row.data)
        if list(new.columns) != list(old.columns):
            raise HTTPException(422, "send every series of the model, in its order: "
                                     + ", ".join(map(str, old.columns)))
        if (row.settings.get("prior") == "independent"
                or row.settings.get("volatility", "constant") != "constant"):
            job = submit_job(session=session, tenant=tenant, kind="update_model", spec=body,
                             max_attempts=settings.job_max_attempts,
                             target={"model_id": row.id, "version": row.version})
            request.app.state.jobs.wake()
            return JSONResponse(job_public(job), status_code=202,
                                headers={"Location": f"/v1/jobs/{job.id}", "Retry-After": "1"})
        fitted, frame = append_to_model(load_fitted(row), old, new)
        replace_fitted(session=session, row=row, frame=frame, model=fitted.model)
        return _public(row, fitted.model)

    return await timed(settings, work)
