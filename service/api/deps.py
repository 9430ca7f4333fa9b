"""Dependencies shared by the routes."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Annotated

from fastapi import Depends, Request
from sqlalchemy.orm import Session

from ..config import Settings
from ..metrics import Metrics


def get_app_settings(request: Request) -> Settings:
    return request.app.state.settings


def get_metrics(request: Request) -> Metrics:
    return request.app.state.metrics


SettingsDep = Annotated[Settings, Depends(get_app_settings)]
MetricsDep = Annotated[Metrics, Depends(get_metrics)]


def get_session(request: Request) -> Iterator[Session]:
    with request.app.state.sessions() as session:
        yield session


def get_tenant(request: Request) -> str:
    """The caller's tenant, set by :func:`service.auth.authenticate`."""
    return request.state.tenant


SessionDep = Annotated[Session, Depends(get_session)]
TenantDep = Annotated[str, Depends(get_tenant)]
