"""``GET /v1/models/{id}/fan-chart.svg`` and ``.png``: the fan chart as an image, for
dashboards that only embed a picture (ETag, 304 when unchanged). Drawn by
:mod:`service.output.charts`, the same look as ``fanfold forecast --plot``."""

from __future__ import annotations

import uuid
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query, Request, Response
from starlette.exceptions import HTTPException

from ...compute.engine import fan_chart
from ...output.charts import fan_figure, figure_bytes, media_type, panels_from_chart
from ...store import load_fitted
from ..deps import AdmissionDep, SessionDep, SettingsDep, TenantDep
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

router = APIRouter(prefix="/v1/models", tags=["models"])

Series = Annotated[str | None, Query(
    max_length=2000, description="series to draw, comma-separated (default: all)")]


def _series(text: str | None, names: list[str]) -> list[str]:
    if text is None or not text.strip():
        return names
    chosen = [s.strip() for s in text.split(",") if s.strip()]
    unknown = [s for s in chosen if s not in names]
    if unknown:
        raise HTTPException(422, f"series: unknown series {unknown[0]!r}; the model has "
                                 + ", ".join(names))
    return chosen


def _image_route(fmt: Literal["svg", "png"]) -> None:
    media = media_type(fmt)

    @router.get(
        f"/{{model_id}}/fan-chart.{fmt}", response_class=Response,
        responses={200: {"content": {media: {"schema": {"type": "string",
                                                        "format": "binary"}}},
                         "description": f"the fan chart as {fmt.upper()}"},
                   **NOT_FOUND, **INVALID, **NOT_MODIFIED},
        summary=f"The fan chart as an {fmt.upper()} image (ETag, 304 when unchanged)",
        description="One panel per series: the last `history` periods, the forecast "
                    "origin (dashed), nested central bands (widest lightest, one hue) and "
                    "the median; dates on the x axis, the series' units on the y axis, a "
                    "legend below. The same numbers as the fan-chart JSON for the same "
                    "query. Embed it in a dashboard and poll with If-None-Match.",
        name=f"fan_chart_{fmt}",
    )
    async def fan_chart_image(
        model_id: uuid.UUID, request: Request, session: SessionDep, settings: SettingsDep,
        tenant: TenantDep, admission: AdmissionDep,
        horizon: Annotated[int, Query(ge=1, le=104)] = 12,
        bands: Annotated[str, Query(max_length=100,
                                    description="coverages in percent")] = "50,80,95",
        draws: Annotated[int, Query(ge=1, le=10_000)] = 2000,
        seed: Annotated[int, Query(ge=0, lt=2**63)] = 0,
        history: Annotated[int, Query(ge=0, le=10_000, description="past periods")] = 36,
        series: Series = None,
    ) -> Response:
        row = row_or_404(session, tenant, model_id)
        levels = parse_bands(bands)
        names = _series(series, list(row.data["series"]))
        etag, headers = etag_for(row, fmt, horizon, levels, draws, seed, history, names)
        if not_modified(request, etag):
            return Response(status_code=304, headers=headers)

        def work() -> bytes:
            chart: dict[str, Any] = fan_chart(
                load_fitted(row), horizon=horizon, bands=levels, draws=draws, seed=seed,
                history=history, limits=settings, admission=admission)
            title = f"{row.name or 'Forecast'}: median and central bands"
            fig = fan_figure(panels_from_chart(chart, names), title=title)
            return figure_bytes(fig, fmt)

        return Response(await timed(settings, work), media_type=media, headers=headers)


_image_route("svg")
_image_route("png")
