"""Per-tenant request rate limit (token bucket, per process): 429 with Retry-After.

RFC 6585 section 4. Each tenant may burst up to ``rate_limit_burst`` requests and then
``rate_limit_per_minute`` on average. A request whose estimated work is long takes more
tokens (:class:`service.compute.limits.Admission`). With several server processes the limit applies
per process (a shared store comes with the scale-out work).
"""

from __future__ import annotations

import math
import threading
import time

from fastapi import Request
from starlette.exceptions import HTTPException

__all__ = ["RateLimiter", "charge", "enforce_rate_limit"]


class RateLimiter:
    """Token buckets keyed by tenant."""

    def __init__(self, per_minute: float, burst: int) -> None:
        self.rate = per_minute / 60.0
        self.burst = float(burst)
        self._buckets: dict[str, tuple[float, float]] = {}
        self._lock = threading.Lock()

    def acquire(self, key: str, now: float | None = None, tokens: float = 1.0) -> float:
        """Take ``tokens`` (at most the burst); 0 if allowed, else the seconds until they
        are available (nothing is taken then)."""
        now = time.monotonic() if now is None else now
        want = min(float(tokens), self.burst)
        with self._lock:
            have, last = self._buckets.get(key, (self.burst, now))
            have = min(self.burst, have + (now - last) * self.rate)
            if have >= want:
                self._buckets[key] = (have - want, now)
                return 0.0
            self._buckets[key] = (have, now)
            return (want - have) / self.rate if self.rate > 0 else math.inf


def _too_many(wait: float, what: str) -> HTTPException:
    retry = max(1, math.ceil(wait)) if math.isfinite(wait) else 3600
    return HTTPException(429, f"too many {what} for this API key; retry after the "
                              "Retry-After seconds", headers={"Retry-After": str(retry)})


def charge(limiter: RateLimiter, tenant: str, tokens: float) -> None:
    """Take ``tokens`` more for an expensive request (see :mod:`service.compute.limits`); 429 when
    the tenant has not got them."""
    wait = limiter.acquire(tenant, tokens=tokens)
    if wait > 0:
        raise _too_many(wait, "requests (or too much estimated work)")


async def enforce_rate_limit(request: Request) -> None:
    """Dependency run after authentication: 429 when the tenant is over its rate."""
    limiter: RateLimiter | None = request.app.state.rate_limiter
    if limiter is None:
        return
    wait = limiter.acquire(request.state.tenant)
    if wait > 0:
        raise _too_many(wait, "requests")
