"""Service settings: one pydantic-settings object, read from ``FANFOLD_*`` variables.

Nothing reads the environment at import time; :func:`get_settings` builds the object on
first use and ``create_app(settings)`` accepts one explicitly (tests do that).
"""

from __future__ import annotations

from functools import lru_cache
from typing import Literal

from pydantic import Field, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

from .auth import ApiKey

__all__ = ["Settings", "get_settings"]


class Settings(BaseSettings):
    """Configuration of the HTTP service. Environment variable = ``FANFOLD_`` + name."""

    model_config = SettingsConfigDict(env_prefix="FANFOLD_", extra="ignore", frozen=True)

    database_url: str = "sqlite:///./fanfold.db"
    host: str = "127.0.0.1"
    port: int = Field(8000, ge=1, le=65535)

    # request limits (OWASP API4): exceeding one gives 413 (body) or 422 (the rest)
    max_body_bytes: int = Field(1_048_576, ge=1024)
    # measured on one core (README "Limits and what they cost"): 100 series, 120 months,
    # the automatic configuration up to 2 lags fit in 3 s and 1000 x 12 paths in 0.3 s
    max_series: int = Field(100, ge=1)
    max_observations: int = Field(10_000, ge=10)
    max_lags: int = Field(13, ge=1)  # a year and a month of monthly data
    max_draws: int = Field(10_000, ge=1)
    max_horizon: int = Field(104, ge=1)
    max_quantiles: int = Field(25, ge=1)
    max_coefficients: int = Field(25_000, ge=1)  # n * (n * p + m) per model
    max_path_values: int = Field(50_000_000, ge=1)  # draws * horizon * series
    # prior "independent" (Gibbs): work chains * (burn + keep * thin) * (series * k**2 +
    # limits.SWEEP_COST), k coefficients per equation (measured on one core: 3e8 in about
    # 1 s at n = 7, 8e9 in about 8 s at n = 20), and the values kept, chains * keep *
    # (k * series + series**2) (4 bytes each, stored with the model)
    max_gibbs_work: float = Field(2e10, gt=0)
    max_stored_draws: int = Field(30_000_000, ge=1)
    request_timeout_s: float = Field(60.0, gt=0)
    # estimated seconds (service.compute.limits) x cost_scale: above 1 on a slower machine than
    # the reference one (tests/benchmarks/run_cost_benchmark.py tells the ratio)
    cost_scale: float = Field(1.0, gt=0)
    # one-shot conjugate forecasts whose limits.inline_cost is at most this run on the
    # event loop instead of the thread pool: no thread hop (about 0.5 ms on these
    # machines) for the small, frequent requests; they take a few ms (about 5 ms at
    # 1e6), too little for the request timeout to matter. 0 = always the thread pool.
    inline_max_cost: float = Field(2e6, ge=0)

    # background jobs: fits over this size (or with "Prefer: respond-async") become jobs
    job_workers: int = Field(2, ge=0)  # threads in this process; 0 = none (tests)
    job_max_attempts: int = Field(3, ge=1)
    fit_timeout_s: float = Field(1800.0, gt=0)  # wall-clock limit of one fit in a job
    job_lease_s: float = Field(30.0, gt=0)  # renewed by a heartbeat while the job runs
    job_recovery_interval_s: float = Field(10.0, gt=0)
    # where fit, update and backtest jobs compute: "threads" = this process's job threads;
    # "dask" = the Dask cluster below (the job threads then only claim, watch and store,
    # so job_workers is how many such jobs this process has in flight)
    job_executor: Literal["threads", "dask"] = "threads"
    sync_max_coefficients: int = Field(10_000, ge=1)
    sync_max_gibbs_work: float = Field(1e9, gt=0)  # Gibbs fits above it run as jobs

    # [{"id": "ops", "sha256": "<hex of the whole key>", "tenant": "acme"}, ...]; create
    # entries with `fanfold keys new --id ops --tenant acme`
    api_keys: list[ApiKey] = []
    # per tenant and process; 0 = no limit (OWASP API4)
    rate_limit_per_minute: float = Field(600.0, ge=0)
    rate_limit_burst: int = Field(60, ge=1)
    # a request takes one more token per this many seconds of estimated work (at most the
    # burst), so that expensive requests cost more; 0 = one token per request
    rate_limit_token_s: float = Field(0.25, ge=0)
    max_running_jobs_per_tenant: int = Field(4, ge=1)
    # requests answered at once per process; more get 503 + Retry-After at once instead
    # of queueing (load shedding; probes and /metrics exempt); 0 = no limit
    max_in_flight: int = Field(64, ge=0)
    docs_enabled: bool = True
    page_enabled: bool = True  # the planner's web page at / (static files, open)
    cors_origins: list[str] = []
    blas_threads: int = Field(1, ge=0)  # 0 = the libraries' default

    # dask.distributed, for batches (service/batch) and, with job_executor "dask", every
    # job: the scheduler's address (tls://host:8786); empty = a LocalCluster started in
    # this process on first use and kept until shutdown
    dask_address: str = ""
    # mutual TLS with the scheduler: CA, client certificate and key files (all or none)
    dask_tls_ca_file: str = ""
    dask_tls_cert_file: str = ""
    dask_tls_key_file: str = ""
    dask_workers: int = Field(0, ge=0)  # LocalCluster worker processes; 0 = one per core
    dask_processes: bool = True  # LocalCluster: processes; false = threads of the server
    batch_chunk_size: int = Field(0, ge=0)  # groups per task; 0 = about 4 tasks per worker
    batch_retries: int = Field(2, ge=0, le=10)  # re-runs of a task that raised
    max_batch_groups: int = Field(10_000, ge=1)
    max_batch_body_bytes: int = Field(16_777_216, ge=1024)  # POST /v1/batches only

    @model_validator(mode="after")
    def _tls_files_together(self) -> Settings:
        files = {"dask_tls_ca_file": self.dask_tls_ca_file,
                 "dask_tls_cert_file": self.dask_tls_cert_file,
                 "dask_tls_key_file": self.dask_tls_key_file}
        missing = [k for k, v in files.items() if not v]
        if 0 < len(missing) < 3:
            raise ValueError(f"Dask TLS needs all three files; {', '.join(missing)} "
                             "not set")
        return self


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The settings from the environment, built once."""
    return Settings()
