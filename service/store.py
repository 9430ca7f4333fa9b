"""Stored models: keyword-only queries, always scoped to a tenant. Routes write no SQL."""

from __future__ import annotations

import base64
import binascii
import datetime as dt
import uuid
from typing import Any

from sqlalchemy import and_, or_, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from priors import FanfoldVAR

from .orm import IdempotencyRecord, StoredModel
from .serialization import (
    data_from_dict,
    data_to_dict,
    draws_from_blob,
    draws_to_blob,
    hyper_from_dict,
    hyper_to_dict,
    posterior_from_blob,
    posterior_to_blob,
)

__all__ = ["BadCursor", "MODEL_COLUMNS", "delete_model", "find_idempotent", "fitted_from_columns",
           "get_model", "list_models", "load_fitted", "model_columns", "model_version",
           "remember_idempotent", "replace_columns", "replace_fitted", "row_columns",
           "save_columns",
           "save_model"]


class BadCursor(ValueError):
    """A pagination cursor this server did not issue."""


def _sampled(model: FanfoldVAR) -> dict[str, Any]:
    """The Gibbs draws and the convergence summary of ``model`` as column values (all
    None for exact samplers; the diagnostics take seconds for large models)."""
    if model.sampler_ is None:
        return {"draws": None, "draws_meta": None, "diagnostics": None}
    blob, meta = draws_to_blob(model.sampler_)
    report = model.convergence()
    return {"draws": blob, "draws_meta": meta,
            "diagnostics": None if report is None else report.summary()}


#: the columns that make a stored model (what :func:`model_columns` returns)
MODEL_COLUMNS = ("settings", "data", "lags", "hyperparameters", "log_ml", "posterior",
                 "posterior_meta", "draws", "draws_meta", "diagnostics")


def model_columns(model: FanfoldVAR, frame: Any, params: dict[str, Any]) -> dict[str, Any]:
    """A fitted model as the values of its row's columns (:data:`MODEL_COLUMNS`): plain
    data only (bytes, numbers, JSON-ready dicts), so a job can compute it on a Dask worker
    and the service only writes it. ``params`` are the stored settings
    (:func:`service.compute.engine.stored_settings`)."""
    blob, meta = posterior_to_blob(model.posterior_)
    return {"settings": params, "data": data_to_dict(frame), "lags": int(model.lags_),
            "hyperparameters": hyper_to_dict(model.hyper_), "log_ml": model.log_ml_,
            "posterior": blob, "posterior_meta": meta, **_sampled(model)}


def save_columns(*, session: Session, tenant: str, name: str | None,
                 columns: dict[str, Any], commit: bool = True) -> StoredModel:
    """Store a model given as :func:`model_columns`; visible only once committed
    (``commit=False`` leaves the commit to the caller, to write more in the same
    transaction)."""
    row = StoredModel(id=str(uuid.uuid4()), tenant_id=tenant, name=name, status="ready",
                      **{k: columns[k] for k in MODEL_COLUMNS})
    session.add(row)
    if commit:
        session.commit()
    else:
        session.flush()
    return row


def save_model(*, session: Session, tenant: str, name: str | None, params: dict[str, Any],
               frame: Any, model: FanfoldVAR, commit: bool = True) -> StoredModel:
    """Store a fitted model (:func:`save_columns` of :func:`model_columns`)."""
    return save_columns(session=session, tenant=tenant, name=name,
                        columns=model_columns(model, frame, params), commit=commit)


def get_model(*, session: Session, tenant: str, model_id: str) -> StoredModel | None:
    return session.scalar(select(StoredModel).where(
        StoredModel.id == model_id, StoredModel.tenant_id == tenant))


def model_version(*, session: Session, tenant: str, model_id: str) -> int | None:
    """The model's version alone (None if there is none): what a conditional GET needs
    to answer 304, without reading the row's data, posterior and draws (megabytes for
    Gibbs models, sent over the network on PostgreSQL at every dashboard poll)."""
    return session.scalar(select(StoredModel.version).where(
        StoredModel.id == model_id, StoredModel.tenant_id == tenant))


def delete_model(*, session: Session, tenant: str, model_id: str) -> bool:
    row = get_model(session=session, tenant=tenant, model_id=model_id)
    if row is None:
        return False
    session.delete(row)
    session.commit()
    return True


def _encode(row: StoredModel) -> str:
    raw = f"{row.created_at.isoformat()}|{row.id}".encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def _decode(cursor: str) -> tuple[dt.datetime, str]:
    try:
        raw = base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4)).decode()
        when, _, model_id = raw.partition("|")
        uuid.UUID(model_id)
        return dt.datetime.fromisoformat(when), model_id
    except (ValueError, binascii.Error, UnicodeDecodeError) as exc:
        raise BadCursor("the cursor is not one this server issued; start from the first "
                        "page") from exc


def list_models(*, session: Session, tenant: str, limit: int,
                cursor: str | None) -> tuple[list[StoredModel], str | None]:
    """A page of the tenant's models, oldest first, and the next page's cursor."""
    query = select(StoredModel).where(StoredModel.tenant_id == tenant)
    if cursor:
        when, model_id = _decode(cursor)
        query = query.where(or_(StoredModel.created_at > when,
                                and_(StoredModel.created_at == when, StoredModel.id > model_id)))
    rows = list(session.scalars(
        query.order_by(StoredModel.created_at, StoredModel.id).limit(limit + 1)))
    more = len(rows) > limit
    rows = rows[:limit]
    return rows, (_encode(rows[-1]) if more and rows else None)


def row_columns(row: StoredModel) -> dict[str, Any]:
    """The model columns of a stored row (:data:`MODEL_COLUMNS`), as plain data."""
    return {k: getattr(row, k) for k in MODEL_COLUMNS}


def fitted_from_columns(columns: dict[str, Any]) -> FanfoldVAR:
    """The model stored as ``columns``, ready to forecast: no tuning, no refit (Gibbs
    draws as stored)."""
    settings = columns["settings"]
    params = {k: v for k, v in settings.items() if k not in ("seed", "configuration")}
    draws = (None if columns["draws"] is None
             else draws_from_blob(columns["draws"], columns["draws_meta"] or {}))
    return FanfoldVAR.restore(
        params, data_from_dict(columns["data"]), lags=columns["lags"],
        hyper=hyper_from_dict(columns["hyperparameters"]),
        posterior=posterior_from_blob(columns["posterior"], columns["posterior_meta"]),
        draws=draws, configuration=settings.get("configuration"),
    )


def load_fitted(row: StoredModel) -> FanfoldVAR:
    """The stored model, ready to forecast: no tuning, no refit (Gibbs draws as stored)."""
    return fitted_from_columns(row_columns(row))


def replace_columns(*, session: Session, row: StoredModel, columns: dict[str, Any],
                    commit: bool = True) -> StoredModel:
    """Store an updated model, given as :func:`model_columns`, in place; the version goes
    up by one (checked, see :class:`service.orm.StoredModel`). ``commit=False`` leaves
    the commit to the caller."""
    for column in MODEL_COLUMNS:
        setattr(row, column, columns[column])
    row.updated_at = dt.datetime.now(dt.UTC)
    if commit:
        session.commit()
    else:
        session.flush()
    return row


def replace_fitted(*, session: Session, row: StoredModel, frame: Any, model: FanfoldVAR,
                   seed: int | None = None, commit: bool = True) -> StoredModel:
    """Store an updated model in place: new data, posterior and (independent prior) draws,
    diagnostics and the ``seed`` that produced them (the other settings as stored)."""
    settings = row.settings if seed is None else {**row.settings, "seed": seed}
    columns = {**model_columns(model, frame, settings), "lags": row.lags,
               "hyperparameters": row.hyperparameters}
    return replace_columns(session=session, row=row, columns=columns, commit=commit)


def find_idempotent(*, session: Session, tenant: str, key: str) -> IdempotencyRecord | None:
    return session.get(IdempotencyRecord, (tenant, key))


def remember_idempotent(*, session: Session, tenant: str, key: str, method_path: str,
                        body_sha256: str, status_code: int, location: str | None,
                        response: dict[str, Any]) -> None:
    """Add the answer to the current transaction (the caller commits)."""
    session.add(IdempotencyRecord(tenant_id=tenant, key=key, method_path=method_path,
                                  body_sha256=body_sha256, status_code=status_code,
                                  location=location, response=response))


def commit_or_winner(*, session: Session, tenant: str, key: str | None
                     ) -> IdempotencyRecord | None:
    """Commit the transaction; None when it landed. When another request with the same
    idempotency ``key`` committed first (a unique-key race), roll back and return the
    winner's record, so the caller answers as the winner did."""
    try:
        session.commit()
    except IntegrityError:
        session.rollback()
        record = find_idempotent(session=session, tenant=tenant, key=key or "")
        if record is None:
            raise
        return record
    return None
