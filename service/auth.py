"""API keys and tenants (OWASP API2 authentication, API1 object-level authorisation).

A key is ``<key id>.<secret>``. Settings hold, per key id, the SHA-256 of the whole key
and the tenant it belongs to; the server never stores or logs a key. Lookup is by id,
then the digests are compared in constant time (``hmac.compare_digest``). With no keys
configured every caller is the shared tenant ``public`` and the server binds loopback
only.
"""

from __future__ import annotations

import hashlib
import hmac
import secrets

from fastapi import Request
from pydantic import BaseModel, Field
from starlette.exceptions import HTTPException

__all__ = ["PUBLIC_TENANT", "ApiKey", "authenticate", "digest", "new_key"]

PUBLIC_TENANT = "public"


class ApiKey(BaseModel):
    """One configured key: its id, the SHA-256 hex digest of the full key, its tenant."""

    id: str = Field(pattern=r"^[A-Za-z0-9_-]{1,64}$")
    sha256: str = Field(pattern=r"^[0-9a-f]{64}$")
    tenant: str = Field(pattern=r"^[A-Za-z0-9_.-]{1,64}$")


def digest(key: str) -> str:
    return hashlib.sha256(key.encode("utf-8")).hexdigest()


def new_key(key_id: str, tenant: str) -> tuple[str, ApiKey]:
    """A fresh random key (shown once) and the entry to put in the settings."""
    key = f"{key_id}.{secrets.token_urlsafe(32)}"
    return key, ApiKey(id=key_id, sha256=digest(key), tenant=tenant)


def _unauthorised(detail: str) -> HTTPException:
    return HTTPException(401, detail, headers={"WWW-Authenticate": 'APIKey header="X-API-Key"'})


async def authenticate(request: Request) -> str:
    """The caller's tenant; raises 401 when keys are configured and this one is not valid."""
    keys: dict[str, ApiKey] = request.app.state.api_keys
    if not keys:
        request.state.tenant = PUBLIC_TENANT
        return PUBLIC_TENANT
    presented = request.headers.get("x-api-key", "")
    key_id, _, _secret = presented.partition(".")
    entry = keys.get(key_id)
    # compare digests even for unknown ids, so timing says nothing about which ids exist
    expected = entry.sha256 if entry else "0" * 64
    ok = hmac.compare_digest(digest(presented), expected) and entry is not None
    if not presented:
        raise _unauthorised("this service needs an API key in the X-API-Key header")
    if not ok:
        raise _unauthorised("the API key is not valid")
    request.state.tenant = entry.tenant
    return entry.tenant
