"""Helpers shared by the service tests."""

from __future__ import annotations

import time


def wait_for_job(client, location: str, timeout: float = 60.0) -> dict:
    """Poll a job until it ends (bounded); its last JSON."""
    deadline = time.monotonic() + timeout
    job: dict = {}
    while time.monotonic() < deadline:
        job = client.get(location).json()
        if job["status"] in ("succeeded", "failed", "cancelled"):
            return job
        time.sleep(0.05)
    raise AssertionError(f"job not finished within {timeout} s: {job}")
