"""A small Python client for the Fanfold HTTP API, returning pandas DataFrames.

    from service.client import FanfoldClient
    with FanfoldClient("http://127.0.0.1:8000") as fanfold:
        table = fanfold.forecast(demand, horizon=12, seed=1)   # tidy DataFrame

Errors come back as :class:`FanfoldAPIError` carrying the RFC 9457 problem document.
"""

from __future__ import annotations

from typing import Any

import httpx
import pandas as pd

__all__ = ["FanfoldAPIError", "FanfoldClient", "forecast_table"]


class FanfoldAPIError(Exception):
    """An error answer from the service; ``problem`` is its problem-details document."""

    def __init__(self, status: int, problem: dict[str, Any]) -> None:
        self.status = status
        self.problem = problem
        fields = ", ".join(e.get("field", "?") for e in problem.get("errors", []))
        detail = problem.get("detail", "") + (f" [{fields}]" if fields else "")
        super().__init__(f"{status} {problem.get('title', '')}: {detail}")


def forecast_table(answer: dict[str, Any]) -> pd.DataFrame:
    """The forecast answer as a tidy table: series, date, step, mean, median, q<level>."""
    rows = []
    for name, fc in answer["forecasts"].items():
        for h, date in enumerate(fc["dates"]):
            row: dict[str, Any] = {"series": name, "date": date, "step": h + 1,
                                   "mean": fc["mean"][h], "median": fc["median"][h]}
            for level, values in fc["quantiles"].items():
                row[f"q{level}"] = values[h]
            rows.append(row)
    return pd.DataFrame(rows)


class FanfoldClient:
    """Client of one Fanfold service. ``transport`` lets tests pass an ASGI transport."""

    def __init__(self, base_url: str, *, api_key: str | None = None, timeout: float = 120.0,
                 transport: httpx.BaseTransport | None = None) -> None:
        headers = {"X-API-Key": api_key} if api_key else {}
        self._http = httpx.Client(base_url=base_url, headers=headers, timeout=timeout,
                                  transport=transport)

    def __enter__(self) -> FanfoldClient:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        self._http.close()

    def _post(self, path: str, **kwargs: Any) -> dict[str, Any]:
        response = self._http.post(path, **kwargs)
        if response.is_error:
            try:
                problem = response.json()
            except ValueError:
                problem = {"title": response.reason_phrase, "detail": response.text[:200]}
            raise FanfoldAPIError(response.status_code, problem)
        return response.json()

    def forecast_raw(self, data: pd.DataFrame, **settings: Any) -> dict[str, Any]:
        """POST /v1/forecasts with ``data`` (DatetimeIndex, one column per series)."""
        if not isinstance(data.index, pd.DatetimeIndex):
            raise TypeError("data needs a DatetimeIndex (one row per period)")
        body = {
            "series": {str(c): data[c].astype(float).tolist() for c in data.columns},
            "dates": [d.date().isoformat() for d in data.index],
            **settings,
        }
        return self._post("/v1/forecasts", json=body)

    def forecast(self, data: pd.DataFrame, **settings: Any) -> pd.DataFrame:
        """Forecast every series of ``data``; a tidy table (see :func:`forecast_table`).

        ``settings`` are the fields of the request: horizon, lags, quantiles, draws, seed,
        transforms, seasonal, ... (see the OpenAPI document).
        """
        return forecast_table(self.forecast_raw(data, **settings))
