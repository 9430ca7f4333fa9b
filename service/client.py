"""A small Python client for the Fanfold HTTP API, returning pandas DataFrames.

    from service.client import FanfoldClient
    with FanfoldClient("http://127.0.0.1:8000") as fanfold:
        table = fanfold.forecast(demand, horizon=12, seed=1)   # tidy DataFrame

Errors come back as :class:`FanfoldAPIError` carrying the RFC 9457 problem document.
"""

from __future__ import annotations

import time
from typing import Any

import httpx
import pandas as pd

__all__ = ["FanfoldAPIError", "FanfoldClient", "forecast_table", "pointwise_table"]


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


def pointwise_table(answer: dict[str, Any], key: str) -> pd.DataFrame:
    """Impulse responses (``key="responses"``, nested shock -> response) or variance
    shares (``key="shares"``, nested series -> shock) as a tidy table with the median and
    one lower/upper column pair per band."""
    outer, inner = ("shock", "response") if key == "responses" else ("response", "shock")
    rows = []
    for a, by_b in answer[key].items():
        for b, values in by_b.items():
            for i, step in enumerate(answer["steps"]):
                row: dict[str, Any] = {outer: a, inner: b, "step": step,
                                       "median": values["median"][i]}
                for band, lu in values["bands"].items():
                    row[f"lower{band}"] = lu["lower"][i]
                    row[f"upper{band}"] = lu["upper"][i]
                if key == "responses":
                    row["unit"] = answer["units"][b]
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

    def _request(self, method: str, path: str, **kwargs: Any) -> httpx.Response:
        response = self._http.request(method, path, **kwargs)
        if response.is_error:
            try:
                problem = response.json()
            except ValueError:
                problem = {"title": response.reason_phrase, "detail": response.text[:200]}
            raise FanfoldAPIError(response.status_code, problem)
        return response

    def _post(self, path: str, **kwargs: Any) -> dict[str, Any]:
        return self._request("POST", path, **kwargs).json()

    def forecast_raw(self, data: pd.DataFrame, **settings: Any) -> dict[str, Any]:
        """POST /v1/forecasts with ``data`` (DatetimeIndex, one column per series)."""
        return self._post("/v1/forecasts", json={**_series_body(data), **settings})

    def forecast(self, data: pd.DataFrame, **settings: Any) -> pd.DataFrame:
        """Forecast every series of ``data``; a tidy table (see :func:`forecast_table`).

        ``settings`` are the fields of the request: horizon, lags, quantiles, draws, seed,
        transforms, seasonal, ... (see the OpenAPI document).
        """
        return forecast_table(self.forecast_raw(data, **settings))

    # ------------------------------------------------------------------ stored models
    def create_model(self, data: pd.DataFrame, *, background: bool = False,
                     wait: float = 600.0, **settings: Any) -> dict[str, Any]:
        """Fit and store a model; waits for the job if the service queued one
        (``background=True`` asks for a job even for a small fit)."""
        headers = {"Prefer": "respond-async"} if background else {}
        response = self._request("POST", "/v1/models", json={**_series_body(data), **settings},
                                 headers=headers)
        if response.status_code == 202:
            job = self.wait_for_job(response.headers["location"], timeout=wait)
            return self._request("GET", job["result"]).json()
        return response.json()

    def wait_for_job(self, location: str, *, timeout: float = 600.0) -> dict[str, Any]:
        """Poll a job until it ends; raises FanfoldAPIError with its problem if it failed."""
        deadline = time.monotonic() + timeout
        while True:
            job = self._request("GET", location).json()
            if job["status"] == "succeeded":
                return job
            if job["status"] in ("failed", "cancelled"):
                problem = job.get("problem") or {"title": job["status"], "detail": ""}
                raise FanfoldAPIError(int(problem.get("status", 500)), problem)
            if time.monotonic() > deadline:
                raise TimeoutError(f"job {location} still {job['status']} after {timeout} s")
            time.sleep(0.2)

    def forecast_model(self, model_id: str, **settings: Any) -> pd.DataFrame:
        """Forecast a stored model (no refit); a tidy table."""
        return forecast_table(self._post(f"/v1/models/{model_id}/forecasts", json=settings))

    def append(self, model_id: str, data: pd.DataFrame, *, wait: float = 600.0
               ) -> dict[str, Any]:
        """Append new periods to a stored model; the updated model. Exact update for the
        conjugate priors; with prior "independent" the service reruns the Gibbs chains in
        a job, which this waits for."""
        response = self._request("POST", f"/v1/models/{model_id}/observations",
                                 json=_series_body(data))
        if response.status_code == 202:
            job = self.wait_for_job(response.headers["location"], timeout=wait)
            return self._request("GET", job["result"]).json()
        return response.json()

    def scenario(self, model_id: str, conditions: list[dict[str, Any]], **settings: Any
                 ) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Conditional forecast of a stored model: (forecast table with a
        ``baseline_median`` column, conditions table with their prior probabilities).

        ``conditions``: dicts like ``{"series": "tyres", "step": 1, "value": 1300}`` or
        ``{"series": "chains", "date": "2026-03-01", "lower": 500, "upper": 560}``.
        """
        answer = self._post(f"/v1/models/{model_id}/scenarios",
                            json={"conditions": conditions, **settings})
        table = forecast_table(answer)
        base = forecast_table({"forecasts": answer["baseline"]})
        table["baseline_median"] = base["median"].to_numpy()
        return table, pd.DataFrame(answer["conditions"])

    def impulse_responses(self, model_id: str, **params: Any) -> pd.DataFrame:
        """How shocks spread (GET impulse-responses); a tidy table, see
        :func:`pointwise_table`. ``params``: horizon, identification, ordering (a list or a
        comma-separated string), shock_size, cumulative, draws, seed, bands."""
        params = _listed(params)
        answer = self._request("GET", f"/v1/models/{model_id}/impulse-responses",
                               params=params).json()
        return pointwise_table(answer, "responses")

    def variance_decomposition(self, model_id: str, **params: Any) -> pd.DataFrame:
        """Variance shares by shock; a tidy table, see :func:`pointwise_table`."""
        answer = self._request("GET", f"/v1/models/{model_id}/variance-decomposition",
                               params=_listed(params)).json()
        return pointwise_table(answer, "shares")

    def replenishment(self, model_id: str, *, lead_time: int,
                      items: list[dict[str, Any]] | None = None,
                      alerts: list[dict[str, Any]] | None = None,
                      **settings: Any) -> dict[str, Any]:
        """Reorder advice: {"items": DataFrame (one row per item), "alerts": DataFrame (one
        row per alert and period), "window": {...}}. Model estimates: review them before
        ordering."""
        answer = self._post(f"/v1/models/{model_id}/replenishment",
                            json={"lead_time": lead_time, "items": items or [],
                                  "alerts": alerts or [], **settings})
        items_frame = pd.DataFrame(answer["items"])
        rows = [{"series": a["series"], "threshold": a["threshold"], "below": a["below"],
                 "date": d, "probability": p, "any_step": a["any_step"]}
                for a in answer["alerts"] for d, p in zip(a["dates"], a["probability"],
                                                          strict=True)]
        return {"items": items_frame, "alerts": pd.DataFrame(rows), "window": answer["window"]}

    def fan_chart(self, model_id: str, **params: Any) -> dict[str, Any]:
        return self._request("GET", f"/v1/models/{model_id}/fan-chart", params=params).json()

    def delete_model(self, model_id: str) -> None:
        self._request("DELETE", f"/v1/models/{model_id}")


def _listed(params: dict[str, Any]) -> dict[str, Any]:
    """Query parameters: lists joined by commas, booleans as true/false."""
    out = {}
    for k, v in params.items():
        if isinstance(v, list | tuple):
            v = ",".join(map(str, v))
        elif isinstance(v, bool):
            v = "true" if v else "false"
        out[k] = v
    return out


def _series_body(data: pd.DataFrame) -> dict[str, Any]:
    """Series as JSON; NaN (a value not known yet in the last periods) becomes null."""
    if not isinstance(data.index, pd.DatetimeIndex):
        raise TypeError("data needs a DatetimeIndex (one row per period)")
    return {"series": {str(c): [None if pd.isna(v) else float(v) for v in data[c]]
                       for c in data.columns},
            "dates": [d.date().isoformat() for d in data.index]}
