"""Request dependencies shared by the routes: JSON content type, readiness, batch cap.

All are ``async def`` and do no blocking work: FastAPI runs a plain ``def`` dependency
in the threadpool, a hop that costs more than the check itself on every request.
"""

from __future__ import annotations

import email.message
from collections.abc import Awaitable, Callable

import anyio.to_thread
from fastapi import Request

from service.middleware import BATCH_SIZE_SCOPE_KEY
from service.problems import FieldError, ProblemError
from service.state import AppState

__all__ = ["require_json", "require_ready", "batch_cap"]


def _is_json(content_type: str | None) -> bool:
    if not content_type:
        return False
    message = email.message.Message()
    message["content-type"] = content_type
    subtype = message.get_content_subtype()
    return message.get_content_maintype() == "application" and (subtype == "json" or subtype.endswith("+json"))


async def require_json(request: Request) -> None:
    """415 unless the body is declared ``application/json``."""
    content_type = request.headers.get("content-type")
    if not _is_json(content_type):
        shown = repr(content_type) if content_type else "no Content-Type header"
        raise ProblemError(
            415,
            f"Send the request body as JSON with 'Content-Type: application/json' (got {shown}).",
            headers={"Accept-Post": "application/json"},
        )


async def require_ready(request: Request) -> AppState:
    """The app state, loading data on first use; 503 when loading or the self-test fails."""
    state: AppState = request.app.state.protolyte
    if not state.ready:
        try:
            await anyio.to_thread.run_sync(state.ensure_loaded)
        except Exception:
            raise ProblemError(
                503,
                "The service has not finished loading its data or its self-test failed; retry shortly.",
                slug="not-ready",
                headers={"Retry-After": "5"},
            ) from None
    return state


def batch_cap(limit: int) -> Callable[[Request], Awaitable[None]]:
    """A dependency answering 422 (pointer ``/items``) for a batch with more than ``limit`` items (before validating them)."""

    async def check(request: Request) -> None:
        try:
            body = await request.json()  # already parsed and cached by FastAPI
        except Exception:
            return
        items = body.get("items") if isinstance(body, dict) else None
        if isinstance(items, list):
            request.scope[BATCH_SIZE_SCOPE_KEY] = len(items)
            if len(items) > limit:
                detail = (
                    f"The batch has {len(items)} items; this server accepts at most {limit} per request "
                    "(PROTOLYTE_BATCH_MAX_ITEMS). Split it into smaller batches."
                )
                raise ProblemError(
                    422,
                    detail,
                    slug="validation-error",
                    errors=[FieldError(pointer="/items", detail=detail, code="too_long")],
                )

    return check
