"""Optional API key on every ``/v1`` route (header ``X-API-Key``, constant-time compare)."""

from __future__ import annotations

import hmac
from collections.abc import Awaitable, Callable

from fastapi import Security
from fastapi.security import APIKeyHeader

from service.problems import ProblemError

__all__ = ["API_KEY_HEADER", "api_key_dependency"]

API_KEY_HEADER = "X-API-Key"

_scheme = APIKeyHeader(
    name=API_KEY_HEADER,
    auto_error=False,
    scheme_name="ApiKeyAuth",
    description="Required on every /v1 route when the deployment sets PROTOLYTE_API_KEY.",
)


def api_key_dependency(expected: str | None) -> Callable[[str | None], Awaitable[None]]:
    """A dependency that checks ``X-API-Key`` against ``expected`` (no check when None)."""
    want = expected.encode() if expected else None

    async def check(key: str | None = Security(_scheme)) -> None:
        if want is None:
            return
        given = (key or "").encode()
        if not hmac.compare_digest(given, want):
            detail = (
                "This server requires an API key: send it in the X-API-Key header."
                if not key
                else "The API key in X-API-Key is not valid for this server."
            )
            raise ProblemError(401, detail, headers={"WWW-Authenticate": f'ApiKey realm="protolyte", header="{API_KEY_HEADER}"'})

    return check
