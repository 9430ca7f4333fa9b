"""Dependencies shared by the routes."""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Request

from ..config import Settings
from ..metrics import Metrics


def get_app_settings(request: Request) -> Settings:
    return request.app.state.settings


def get_metrics(request: Request) -> Metrics:
    return request.app.state.metrics


SettingsDep = Annotated[Settings, Depends(get_app_settings)]
MetricsDep = Annotated[Metrics, Depends(get_metrics)]
