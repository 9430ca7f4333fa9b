"""``POST /v1/forecasts``: one-shot, stateless forecasts from JSON or CSV."""

from __future__ import annotations

import time
from typing import Any

from fastapi import APIRouter, Request
from fastapi.exceptions import RequestValidationError
from pydantic import ValidationError

from ...compute.engine import frame_from_spec, run_forecast
from ...compute.limits import Admission, inline_cost
from ...errors import PROBLEM_JSON, problem
from ...responses import JSONResponse
from ...schemas import ForecastCreate, ForecastPublic, ForecastSettings
from ...serialization import frame_from_csv
from ..deps import AdmissionDep, MetricsDep, SettingsDep
from ..json_body import JSONBodyRoute, is_json_media_type, read_json
from ._shared import timed

router = APIRouter(prefix="/v1", tags=["forecasts"], route_class=JSONBodyRoute)

_CSV_EXAMPLE = "date,tyres,inner_tubes\n" + "".join(
    f"2016-{m:02d}-01,{t},{u}\n" for m, t, u in zip(
        range(1, 13), (1256, 1279, 1329, 1236, 1355, 1499, 1510, 1366, 1321, 1334, 1182, 1081),
        (1986, 2074, 2216, 2364, 2342, 2408, 2654, 2514, 2462, 2415, 2196, 2099), strict=True))
_PROBLEMS: dict[int | str, dict[str, Any]] = {
    code: {"description": text, "content": {PROBLEM_JSON: {}}}
    for code, text in ((413, "body over the size limit"), (415, "not JSON or CSV"),
                       (422, "invalid input, unusable data or a limit exceeded"),
                       (503, "the forecast took longer than the request timeout"))
}
_BODY = {
    "requestBody": {
        "required": True,
        "content": {
            "application/json": {"schema": {"$ref": "#/components/schemas/ForecastCreate"}},
            "text/csv": {
                "schema": {"type": "string"},
                "example": _CSV_EXAMPLE,
                "description": "dates in the first column, one column per series; the "
                               "settings of ForecastCreate (all but series, start, "
                               "frequency, dates) as query parameters, and dayfirst=true "
                               "to read dates such as 01/02/2024 as 1 February",
            },
        },
    }
}


_TRUE, _FALSE = ("true", "1", "yes", "on"), ("false", "0", "no", "off")


def _query_settings(request: Request) -> tuple[ForecastSettings, bool]:
    """The settings of a CSV body from the query string, and ``dayfirst`` (how to read
    its dates: not a model setting)."""
    raw: dict[str, Any] = dict(request.query_params)
    dayfirst_text = str(raw.pop("dayfirst", "false")).lower()
    if dayfirst_text not in _TRUE + _FALSE:
        raise RequestValidationError([{
            "type": "bool_parsing", "loc": ("query", "dayfirst"),
            "msg": "Input should be a valid boolean, unable to interpret input",
            "input": dayfirst_text}])
    if "quantiles" in raw:
        raw["quantiles"] = [q for q in raw["quantiles"].split(",") if q.strip()]
    for key in ("sum_coef", "initial", "season_scale"):
        if raw.get(key) in ("", "off", "null"):
            raw[key] = None
    for key in ("hyperprior", "seasonal", "trend", "constant", "cumulative", "counts",
                "reject_explosive"):  # query strings: true/false, 1/0, yes/no
        value = str(raw.get(key, "")).lower()
        if value in _TRUE:
            raw[key] = True
        elif value in _FALSE:
            raw[key] = False
    try:
        return ForecastSettings.model_validate(raw), dayfirst_text in _TRUE
    except ValidationError as exc:
        raise RequestValidationError([{**e, "loc": ("query", *e["loc"])}
                                      for e in exc.errors()]) from None


async def _spec_and_data(request: Request) -> tuple[ForecastSettings, Any]:
    """The settings and a function that builds the data frame (run off the event loop)."""
    header = request.headers.get("content-type", "")
    ctype = header.split(";")[0].strip().lower()
    body = await request.body()
    if is_json_media_type(header):
        body, _ = read_json(body)  # the same checks as every JSON route
        try:
            spec = ForecastCreate.model_validate_json(body or b"{}")
        except ValidationError as exc:
            raise RequestValidationError(exc.errors()) from None
        return spec, lambda: frame_from_spec(spec)
    if ctype in ("text/csv", "application/csv"):
        text = body.decode("utf-8-sig", "replace")  # a byte-order mark is ignored here too
        spec, dayfirst = _query_settings(request)
        return spec, lambda: frame_from_csv(text, dayfirst=dayfirst)
    raise _Unsupported(ctype)


def _small(spec: ForecastSettings, settings: Any) -> bool:
    """Whether this one-shot runs on the event loop (JSON, conjugate, small: see
    ``Settings.inline_max_cost``); CSV bodies are parsed in the thread pool."""
    if not isinstance(spec, ForecastCreate) or spec.uses_gibbs:
        return False
    lengths = [len(v) for v in spec.series.values()]
    return inline_cost(spec, len(lengths), max(lengths)) <= settings.inline_max_cost


def _forecast(spec: ForecastSettings, make_frame: Any, settings: Any,
              admission: Admission | None = None) -> dict[str, Any]:
    return run_forecast(spec, make_frame(), settings, admission=admission)


class _Unsupported(Exception):
    def __init__(self, ctype: str) -> None:
        self.ctype = ctype


@router.post(
    "/forecasts",
    summary="Forecast several related series in one call",
    description="Fits a Bayesian VAR with a Minnesota prior to the series sent and returns "
                "the predictive distribution per series and step: mean, median and the "
                "quantiles asked for. Nothing is stored. The same request with the same "
                "seed returns the same bytes.",
    response_model=ForecastPublic,
    responses=_PROBLEMS,
    openapi_extra=_BODY,
)
async def create_forecast(request: Request, settings: SettingsDep, metrics: MetricsDep,
                          admission: AdmissionDep) -> JSONResponse:
    try:
        spec, make_frame = await _spec_and_data(request)
    except _Unsupported as exc:
        return problem(415, f"content type {exc.ctype!r} is not supported; send "
                            "application/json or text/csv", request=request)
    start = time.perf_counter()
    if _small(spec, settings):  # a few ms: no hop to the thread pool
        payload = _forecast(spec, make_frame, settings)
    else:
        payload = await timed(settings, _forecast, spec, make_frame, settings, admission)
    metrics.forecast.observe(time.perf_counter() - start)
    return JSONResponse(payload)
