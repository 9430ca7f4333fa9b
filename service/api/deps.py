"""Dependencies shared by the routes.

The ones that do not block are ``async def``: FastAPI runs a plain ``def`` dependency in
its thread pool, a thread hop per dependency and request (measured: 20 hops and about
1 ms per one-shot forecast). The database session stays a plain generator: closing it
may wait on the database.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Annotated

from fastapi import Depends, Request
from sqlalchemy.orm import Session

from ..compute.limits import Admission
from ..config import Settings
from ..metrics import Metrics


async def get_app_settings(request: Request) -> Settings:
    return request.app.state.settings


async def get_metrics(request: Request) -> Metrics:
    return request.app.state.metrics


SettingsDep = Annotated[Settings, Depends(get_app_settings)]
MetricsDep = Annotated[Metrics, Depends(get_metrics)]


def get_session(request: Request) -> Iterator[Session]:
    with request.app.state.sessions() as session:
        yield session


async def get_tenant(request: Request) -> str:
    """The caller's tenant, set by :func:`service.auth.authenticate`."""
    return request.state.tenant


async def get_admission(request: Request) -> Admission:
    """Admission of this request's work: time estimate against the timeout, rate-limit
    tokens by estimated seconds (:mod:`service.compute.limits`)."""
    state = request.app.state
    return Admission(state.settings, state.rate_limiter, request.state.tenant)


SessionDep = Annotated[Session, Depends(get_session)]
TenantDep = Annotated[str, Depends(get_tenant)]
AdmissionDep = Annotated[Admission, Depends(get_admission)]
