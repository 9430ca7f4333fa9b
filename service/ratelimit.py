"""Per-tenant request rate limit (token bucket, per process): 429 with Retry-After.

RFC 6585 section 4. Each tenant may burst up to ``rate_limit_burst`` requests and then
``rate_limit_per_minute`` on average. With several server processes the limit applies
per process (a shared store comes with the scale-out work).
"""

from __future__ import annotations

import math
import threading
import time

from fastapi import Request
from starlette.exceptions import HTTPException

__all__ = ["RateLimiter", "enforce_rate_limit"]


class RateLimiter:
    """Token buckets keyed by tenant."""

    def __init__(self, per_minute: float, burst: int) -> None:
        self.rate = per_minute / 60.0
        self.burst = float(burst)
        self._buckets: dict[str, tuple[float, float]] = {}
        self._lock = threading.Lock()

    def acquire(self, key: str, now: float | None = None) -> float:
        """Take one token; 0 if allowed, else the seconds until one is available."""
        now = time.monotonic() if now is None else now
        with self._lock:
            tokens, last = self._buckets.get(key, (self.burst, now))
            tokens = min(self.burst, tokens + (now - last) * self.rate)
            if tokens >= 1.0:
                self._buckets[key] = (tokens - 1.0, now)
                return 0.0
            self._buckets[key] = (tokens, now)
            return (1.0 - tokens) / self.rate


async def enforce_rate_limit(request: Request) -> None:
    """Dependency run after authentication: 429 when the tenant is over its rate."""
    limiter: RateLimiter | None = request.app.state.rate_limiter
    if limiter is None:
        return
    wait = limiter.acquire(request.state.tenant)
    if wait > 0:
        raise HTTPException(429, "too many requests for this API key; retry after the "
                                 "Retry-After seconds", headers={
                                     "Retry-After": str(max(1, math.ceil(wait)))})
