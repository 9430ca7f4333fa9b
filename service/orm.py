"""Tables. Every row has a ``tenant_id``; queries filter on it (OWASP API1)."""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import JSON, DateTime, Float, Integer, LargeBinary, String
from sqlalchemy.orm import Mapped, mapped_column
from sqlalchemy.types import TypeDecorator

from .db import Base

__all__ = ["IdempotencyRecord", "Job", "StoredModel", "UTCDateTime"]


def _now() -> dt.datetime:
    return dt.datetime.now(dt.UTC)


class UTCDateTime(TypeDecorator[dt.datetime]):
    """Timestamps stored in UTC and always read back timezone-aware (SQLite keeps none)."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: dt.datetime | None, dialect: Any) -> Any:
        return None if value is None else value.astimezone(dt.UTC)

    def process_result_value(self, value: Any, dialect: Any) -> dt.datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=dt.UTC) if value.tzinfo is None else value.astimezone(dt.UTC)


class StoredModel(Base):
    """A fitted model: its data, settings, chosen hyperparameters and exact posterior.

    ``posterior`` holds the conjugate posterior's arrays as raw little-endian float64,
    zlib-compressed; ``posterior_meta`` their shapes and the SHA-256 of the raw bytes
    (never pickle). Models with the independent prior also keep their Gibbs draws in
    ``draws`` (raw little-endian float32; ``draws_meta``: shapes, sampler settings,
    SHA-256) and the chains' convergence summary in ``diagnostics``; all three are null
    for exact samplers. ``version`` changes whenever the model changes (ETags).
    """

    __tablename__ = "models"

    id: Mapped[str] = mapped_column(String(36), primary_key=True)
    tenant_id: Mapped[str] = mapped_column(String(64), index=True)
    name: Mapped[str | None] = mapped_column(String(200))
    status: Mapped[str] = mapped_column(String(16), default="ready")
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=_now)
    updated_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=_now)
    version: Mapped[int] = mapped_column(Integer, default=1)
    settings: Mapped[dict] = mapped_column(JSON)
    data: Mapped[dict] = mapped_column(JSON)
    lags: Mapped[int] = mapped_column(Integer)
    hyperparameters: Mapped[dict] = mapped_column(JSON)
    log_ml: Mapped[float | None] = mapped_column(Float)
    posterior: Mapped[bytes] = mapped_column(LargeBinary)
    posterior_meta: Mapped[dict] = mapped_column(JSON)
    draws: Mapped[bytes | None] = mapped_column(LargeBinary, nullable=True)
    draws_meta: Mapped[dict | None] = mapped_column(JSON, nullable=True)
    diagnostics: Mapped[dict | None] = mapped_column(JSON, nullable=True)

    # optimistic concurrency: every UPDATE checks and bumps the version, so two updates
    # racing on one model cannot both win (the loser gets StaleDataError -> 409)
    __mapper_args__ = {"version_id_col": version}


class IdempotencyRecord(Base):
    """The answer to a POST made with an ``Idempotency-Key``, kept so a retry gets it
    again (IETF draft-ietf-httpapi-idempotency-key-header). Written in the same
    transaction as what the POST created."""

    __tablename__ = "idempotency_keys"

    tenant_id: Mapped[str] = mapped_column(String(64), primary_key=True)
    key: Mapped[str] = mapped_column(String(255), primary_key=True)
    method_path: Mapped[str] = mapped_column(String(255))
    body_sha256: Mapped[str] = mapped_column(String(64))
    status_code: Mapped[int] = mapped_column(Integer)
    location: Mapped[str | None] = mapped_column(String(255))
    response: Mapped[dict] = mapped_column(JSON)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=_now)


class Job(Base):
    """A unit of background work (fitting a model), run by the worker pool.

    States: queued -> running -> succeeded | failed | cancelled. A running job holds a
    lease; a job whose lease ran out (its worker died) goes back to the queue until it
    has used ``max_attempts``, then fails with the reason.
    """

    __tablename__ = "jobs"

    id: Mapped[str] = mapped_column(String(36), primary_key=True)
    tenant_id: Mapped[str] = mapped_column(String(64), index=True)
    kind: Mapped[str] = mapped_column(String(32))
    status: Mapped[str] = mapped_column(String(16), index=True)
    progress: Mapped[float] = mapped_column(Float, default=0.0)
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    max_attempts: Mapped[int] = mapped_column(Integer, default=3)
    cancel_requested: Mapped[int] = mapped_column(Integer, default=0)
    lease_until: Mapped[dt.datetime | None] = mapped_column(UTCDateTime, nullable=True)
    # "host:pid:thread" of the worker that claimed the job last (several replicas)
    worker: Mapped[str | None] = mapped_column(String(255), nullable=True)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=_now)
    updated_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=_now)
    payload: Mapped[dict] = mapped_column(JSON)
    result_model_id: Mapped[str | None] = mapped_column(String(36), nullable=True)
    result: Mapped[dict | None] = mapped_column(JSON, nullable=True)
    error: Mapped[dict | None] = mapped_column(JSON, nullable=True)
