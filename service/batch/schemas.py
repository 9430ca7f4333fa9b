"""The request body of ``POST /v1/batches``."""

from __future__ import annotations

from typing import Annotated

from pydantic import ConfigDict, Field, field_validator

from ..schemas import ModelSettings, Number, QuantileLevels, Seed

__all__ = ["BatchCreate"]

Cell = Number | str | None
_EXAMPLE_TABLE = {
    "date": ["2024-01-01", "2024-02-01", "2024-01-01", "2024-02-01"],
    "warehouse": ["leeds", "leeds", "leeds", "leeds"],
    "family": ["brakes", "brakes", "brakes", "brakes"],
    "series": ["brake_pads", "brake_pads", "brake_cables", "brake_cables"],
    "value": [412, 398, 133, 141],
}


class BatchCreate(ModelSettings):
    """One model per group of a long table (a job). Each group's forecast draws from a
    seed derived from ``seed`` and the group's labels, so it is the same in any batch."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{
        "table": _EXAMPLE_TABLE, "group_by": ["warehouse", "family"], "horizon": 6,
        "draws": 500, "lags": 1, "seed": 3}]})

    table: dict[str, Annotated[list[Cell], Field(min_length=1)]] = Field(
        ..., min_length=3, max_length=13, description="the long table by column, equal "
        "lengths: a date column, the group columns, a series column and a value column "
        "(null = missing value)")
    group_by: list[Annotated[str, Field(min_length=1, max_length=100)]] = Field(
        ..., min_length=1, max_length=10, description="the group columns")
    date_column: str = Field("date", min_length=1, max_length=100)
    series_column: str = Field("series", min_length=1, max_length=100)
    value_column: str = Field("value", min_length=1, max_length=100)
    horizon: int = Field(12, ge=1, le=104, description="periods ahead")
    quantiles: QuantileLevels = [0.05, 0.5, 0.95]
    draws: int = Field(1000, ge=10, le=10_000, description="simulated paths per group")
    seed: Seed = Field(None, description="the batch seed (each group's seed is derived "
                       "from it and the group's labels); default: a fresh seed, recorded in "
                       "the results")

    @field_validator("table")
    @classmethod
    def _equal_lengths(cls, v: dict[str, list[Cell]]) -> dict[str, list[Cell]]:
        lengths = {len(col) for col in v.values()}
        if len(lengths) > 1:
            raise ValueError(f"the table's columns have different lengths "
                             f"({', '.join(f'{k}: {len(c)}' for k, c in v.items())})")
        return v
