"""A fast path for the common case of ``POST /v1/equilibrium``: one valid JSON stream.

SCADA historians send this request thousands of times a second. Through FastAPI it
passes a dozen ASGI layers, the dependency solver and a pydantic round trip per
request; here a valid request is answered directly:

* the request is ``POST /v1/equilibrium`` with ``Content-Type: application/json``
  (optionally ``; charset=utf-8``), a ``Content-Length`` within the body limit, the
  right ``X-API-Key`` (when the server has one), no CORS ``Origin`` to answer, and
  the service is ready;
* the body parses (orjson) and validates as :class:`service.schemas.Stream` in the
  same (python, strict) mode FastAPI uses, and passes
  :func:`service.checks.structural_errors`.

Anything else — a wrong header, invalid JSON, a field error, an over-long body, a
client that went away while sending — is handed, with the body read so far replayed,
to the full FastAPI app, so every error response is produced by the same code as
without the fast path. After validation the solve runs through the same
:class:`service.solving.Solver` (time budget, coalescing, metrics) and the answer is
the same bytes and headers as the route's ``json_response``; an exception from the
solve is answered by the app's own exception handlers (a defect re-raises to the
outermost error middleware, as from the route). The middleware sits inside
``RequestContextMiddleware``, so the request id, access log line and metrics are the
same too. ``PROTOLYTE_FAST_PATH=0`` turns it off.

It runs in front of the whole app (:class:`service.app.ProtolyteAPI` calls
:meth:`EquilibriumFastPath.serve`); a second instance sits in the middleware stack only
to answer, with the route's exception handlers, a solve error that ``serve`` hands on.
"""

from __future__ import annotations

import hmac
from time import perf_counter
from typing import Any

import orjson
from pydantic import ValidationError
from starlette.requests import Request
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.checks import structural_errors
from service.convert import response_dict, to_spec
from service.metrics import Metrics
from service.middleware import (
    SOLVE_ERROR_SCOPE_KEY,
    START_SCOPE_KEY,
    accept_request_id,
    log_request,
    request_id_header,
)
from service.problems import REQUEST_ID_SCOPE_KEY
from service.schemas import Stream
from service.solving import Solver
from service.state import AppState

__all__ = ["EquilibriumFastPath"]

PATH = "/v1/equilibrium"
_JSON_TYPES = frozenset((b"application/json", b"application/json; charset=utf-8", b"application/json;charset=utf-8"))
_validate = Stream.model_validate


class EquilibriumFastPath:
    """Answers a valid single-stream request without FastAPI's stack (see the module)."""

    def __init__(
        self,
        app: ASGIApp,
        *,
        solver: Solver,
        state: AppState,
        fastapi_app: Any,
        route: Any,
        body_limit: int,
        api_key: str | None,
        cors: bool,
        metrics: Metrics | None = None,
    ) -> None:
        self.app = app
        self.solver = solver
        self.state = state
        self.fastapi_app = fastapi_app
        self.body_limit = body_limit
        self.api_key = api_key.encode() if api_key else None
        self.cors = cors
        self.route = route  # what the router puts in scope["route"]: the metrics and log label
        self.route_path = route.path
        self.metrics = metrics if metrics is not None else solver.metrics

    def _eligible(self, scope: Scope) -> bool:
        """Headers as the fast path needs them (anything unusual: the full app decides)."""
        content_type = length = key = None
        for name, value in scope["headers"]:
            if name == b"content-type":
                if content_type is not None:
                    return False
                content_type = value
            elif name == b"content-length":
                if length is not None:
                    return False
                length = value
            elif name == b"x-api-key":
                if key is not None:
                    return False
                key = value
            elif name == b"transfer-encoding" or (name == b"origin" and self.cors):
                return False
        if content_type is None or content_type.lower() not in _JSON_TYPES:
            return False
        if length is None or not length.isdigit() or not 0 < int(length) <= self.body_limit:
            return False
        if self.api_key is not None:  # compared as service.auth does: the latin-1 header text, UTF-8 encoded
            if key is None or not hmac.compare_digest(key.decode("latin-1").encode(), self.api_key):
                return False
        return self.state.ready

    def takes(self, scope: Scope) -> bool:
        """True when this request is one the fast path tries (the body decides the rest)."""
        return (
            scope["type"] == "http"
            and scope["path"] == PATH
            and scope["method"] == "POST"
            and not scope.get("root_path")
            and self._eligible(scope)
        )

    async def _read_stream(self, scope: Scope, receive: Receive) -> tuple[Stream | None, list[Message]]:
        """The body's valid stream and the messages read; ``None`` when the full app must answer."""
        messages: list[Message] = []
        chunks: list[bytes] = []
        size = 0
        while True:  # the body, as sent; stop at the limit (the full app answers 413)
            message = await receive()
            messages.append(message)
            if message["type"] != "http.request":
                return None, messages
            chunk = message.get("body", b"")
            size += len(chunk)
            if size > self.body_limit:
                return None, messages
            chunks.append(chunk)
            if not message.get("more_body", False):
                break
        body = chunks[0] if len(chunks) == 1 else b"".join(chunks)
        # validation; any doubt: the full app answers (and explains)
        try:
            data = orjson.loads(body)
        except orjson.JSONDecodeError:
            return None, messages
        if type(data) is not dict:
            return None, messages
        try:
            stream = _validate(data)
        except ValidationError:
            return None, messages
        if structural_errors(stream):
            return None, messages
        return stream, messages

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        """As middleware: answer a solve error that :meth:`serve` handed to the full stack
        (with the route's exception handlers); pass everything else on."""
        exc = scope.pop(SOLVE_ERROR_SCOPE_KEY, None)
        if exc is not None:
            await self._answer_error(scope, receive, send, exc)
            return
        await self.app(scope, receive, send)

    async def _content(self, stream: Stream) -> bytes:
        result = await self.solver.solve(to_spec(stream))
        return orjson.dumps(response_dict(result, self.state.version))

    async def _answer_error(self, scope: Scope, receive: Receive, send: Send, exc: Exception) -> None:
        handler = self._handler(exc)
        if handler is None:
            raise exc  # a defect: the outermost error middleware answers 500, as from the route
        response = await handler(Request(scope, receive), exc)
        await response(scope, receive, send)

    async def serve(self, scope: Scope, receive: Receive, send: Send, full: ASGIApp) -> None:
        """In front of the whole app (see :class:`service.app.ProtolyteAPI`): a request
        :meth:`takes` is answered here with the request id, metrics and access line of
        :class:`service.middleware.RequestContextMiddleware`; anything else, and an
        exception from the solve, goes through ``full`` (every middleware, as without)."""
        start = perf_counter()
        stream, messages = await self._read_stream(scope, receive)
        if stream is None:
            return await self._fallback(scope, receive, send, messages, full)
        rid = accept_request_id(request_id_header(scope))
        scope[REQUEST_ID_SCOPE_KEY] = rid
        scope["route"] = self.route
        status = 500
        recorded = handed = False
        try:
            try:
                content = await self._content(stream)
            except Exception as exc:  # answered by the full stack: handlers, 500 middleware, log
                handed = True  # ... and counted there
                scope[SOLVE_ERROR_SCOPE_KEY] = exc
                scope[START_SCOPE_KEY] = start
                await full(scope, receive, send)
                return
            status = 200
            await send({
                "type": "http.response.start",
                "status": 200,
                "headers": [
                    (b"content-length", str(len(content)).encode("latin-1")),
                    (b"content-type", b"application/json"),
                    (b"x-request-id", rid.encode("latin-1")),
                ],
            })
            recorded = True  # counted before the last byte leaves, as RequestContextMiddleware does
            self.metrics.observe_request(self.route_path, "POST", 200, perf_counter() - start)
            await send({"type": "http.response.body", "body": content})
        finally:
            if not handed:
                elapsed = perf_counter() - start
                if not recorded:  # e.g. cancelled: as RequestContextMiddleware's finally
                    self.metrics.observe_request(self.route_path, "POST", status, elapsed)
                log_request(rid, "POST", self.route_path, status, elapsed, None)

    def _handler(self, exc: Exception) -> Any:
        """The app's handler of ``exc`` as its exception middleware would pick it (not the 500 one)."""
        handlers = self.fastapi_app.exception_handlers
        for cls in type(exc).__mro__:
            if cls is Exception:
                return None
            if cls in handlers:
                return handlers[cls]
        return None

    async def _fallback(
        self, scope: Scope, receive: Receive, send: Send, messages: list[Message], app: ASGIApp
    ) -> None:
        """``app`` (the full app), with the messages read so far replayed first."""
        pending = list(messages)

        async def replay() -> Message:
            if pending:
                return pending.pop(0)
            return await receive()

        await app(scope, replay, send)
