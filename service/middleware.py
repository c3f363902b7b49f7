"""ASGI middleware: request id, access log + metrics, and the request-body size limit.

Pure ASGI (no BaseHTTPMiddleware) so streaming and exceptions pass through unchanged.
"""

from __future__ import annotations

import logging
import os
import re
import time
from typing import Any

from starlette.datastructures import Headers
from starlette.exceptions import HTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.logging import ACCESS_LOGGER, write_access_line
from service.metrics import Metrics
from service.problems import REQUEST_ID_SCOPE_KEY, make_problem, problem_response

__all__ = [
    "BATCH_SIZE_SCOPE_KEY",
    "REQUEST_ID_HEADER",
    "BodyLimitMiddleware",
    "BodyTooLarge",
    "RequestContextMiddleware",
    "accept_request_id",
]

REQUEST_ID_HEADER = "X-Request-ID"
BATCH_SIZE_SCOPE_KEY = "protolyte.batch_size"
#: Set by the fast path (service.fastpath) when its solve raised and it hands the request
#: to the full app: the exception and the request's start time.
SOLVE_ERROR_SCOPE_KEY = "protolyte.fast_path_error"
START_SCOPE_KEY = "protolyte.fast_path_start"
_ID_RE = re.compile(r"^[A-Za-z0-9._-]{1,64}$")
_log = logging.getLogger(ACCESS_LOGGER)
_ID_POOL_SIZE = 256
_id_pool: list[str] = []
_CLEAR_VERSION = ~((0xC000 << 48) | (0xF000 << 64))
_SET_VERSION = (0x8000 << 48) | (0x4000 << 64)  # RFC 4122 variant, version 4 (as uuid.UUID(version=4))


def _refill_ids() -> None:
    """256 fresh UUID4 hex ids from ONE ``os.urandom`` call (uuid.uuid4 makes one per id)."""
    raw = os.urandom(16 * _ID_POOL_SIZE)
    _id_pool.extend(
        "%032x" % ((int.from_bytes(raw[i : i + 16], "big") & _CLEAR_VERSION) | _SET_VERSION)
        for i in range(0, len(raw), 16)
    )


os.register_at_fork(after_in_child=_id_pool.clear)  # forked workers never share ids


def fresh_request_id() -> str:
    """A fresh UUID4 hex (random bits from the OS, drawn 256 ids at a time)."""
    if not _id_pool:
        _refill_ids()
    return _id_pool.pop()


def accept_request_id(value: str | None) -> str:
    """The caller's id if it matches ``[A-Za-z0-9._-]{1,64}``, else a fresh UUID4 hex."""
    if value and _ID_RE.match(value):
        return value
    return fresh_request_id()


def request_id_header(scope: Scope) -> str | None:
    """The first ``X-Request-ID`` header (latin-1), as ``Headers(scope=scope).get`` finds it."""
    for name, value in scope["headers"]:
        if name == b"x-request-id":
            return value.decode("latin-1")
    return None


def _route_template(scope: Scope) -> str:
    route = scope.get("route")
    path = getattr(route, "path", None)
    return path if isinstance(path, str) else "unmatched"


class RequestContextMiddleware:
    """Assign the request id, echo it, then log one JSON line and count the request."""

    def __init__(self, app: ASGIApp, metrics: Metrics) -> None:
        self.app = app
        self.metrics = metrics

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        if SOLVE_ERROR_SCOPE_KEY in scope:  # the outer fast path's request: its start and id
            start = scope.pop(START_SCOPE_KEY)
            rid = scope[REQUEST_ID_SCOPE_KEY]
        else:
            start = time.perf_counter()
            rid = accept_request_id(request_id_header(scope))
        scope[REQUEST_ID_SCOPE_KEY] = rid
        status = 500
        recorded = False

        def record() -> float:
            nonlocal recorded
            elapsed = time.perf_counter() - start
            if not recorded:  # counted before the last byte leaves, so a client that got
                recorded = True  # its answer always finds it counted
                self.metrics.observe_request(_route_template(scope), str(scope.get("method", "")), status, elapsed)
            return elapsed

        async def send_with_id(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = int(message["status"])
                headers = [(k, v) for k, v in message.get("headers", []) if k.lower() != b"x-request-id"]
                headers.append((b"x-request-id", rid.encode("latin-1")))
                message = {**message, "headers": headers}
            elif message["type"] == "http.response.body" and not message.get("more_body", False):
                record()
            await send(message)

        try:
            await self.app(scope, receive, send_with_id)
        finally:
            elapsed = record() if not recorded else time.perf_counter() - start
            log_request(
                rid, str(scope.get("method", "")), _route_template(scope), status, elapsed,
                scope.get(BATCH_SIZE_SCOPE_KEY),
            )


def log_request(rid: str, method: str, route: str, status: int, elapsed: float, batch_size: Any) -> None:
    """The access line of one request (ERROR for a 5xx status)."""
    extra: dict[str, Any] = {
        "request_id": rid,
        "method": method,
        "route": route,
        "status": status,
        "duration_seconds": round(elapsed, 6),
        "batch_size": batch_size,
    }
    if status >= 500 or not write_access_line(_log, extra):
        _log.log(logging.ERROR if status >= 500 else logging.INFO, "request", extra=extra)


class BodyTooLarge(HTTPException):
    """The request body passed the configured limit."""

    def __init__(self, limit: int) -> None:
        super().__init__(
            413,
            f"The request body is larger than this server's limit of {limit} bytes "
            "(PROTOLYTE_BODY_LIMIT_BYTES); send a smaller batch.",
        )


class BodyLimitMiddleware:
    """Refuse bodies over ``limit`` bytes: by Content-Length at once, else while streaming."""

    def __init__(self, app: ASGIApp, limit: int) -> None:
        self.app = app
        self.limit = limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = Headers(scope=scope).get("content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit:
            await self._refuse(scope, receive, send)
            return
        received = 0
        started = False

        async def limited_receive() -> Message:
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > self.limit:
                    raise BodyTooLarge(self.limit)
            return message

        async def tracking_send(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, limited_receive, tracking_send)
        except BodyTooLarge:
            if started:
                raise
            await self._refuse(scope, receive, send)

    async def _refuse(self, scope: Scope, receive: Receive, send: Send) -> None:
        rid = scope.get(REQUEST_ID_SCOPE_KEY)
        exc = BodyTooLarge(self.limit)
        problem = make_problem(413, "content-too-large", str(exc.detail), rid if isinstance(rid, str) else None)
        response = problem_response(problem, {"Connection": "close"})
        await response(scope, receive, send)
