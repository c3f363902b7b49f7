"""POST /v1/equilibrium and POST /v1/equilibrium/batch."""

from __future__ import annotations

import gc
import json
import logging
import threading
from collections.abc import Callable, Coroutine, Iterator
from contextlib import ExitStack, contextmanager
from typing import Any

import anyio.to_thread
import orjson
from fastapi import APIRouter, Depends, Request
from fastapi.responses import Response
from fastapi.routing import APIRoute

from models.results import StreamFailure
from service.checks import structural_errors
from service.convert import NonFiniteResult, response_dict, to_spec
from service.deps import batch_cap, require_json, require_ready
from service.openapi import ERROR_RESPONSES
from service.problems import FieldError, ProblemError, make_problem, summarise
from service.schemas import (
    BatchItemError,
    BatchRequest,
    BatchResponse,
    EquilibriumResponse,
    Stream,
)
from service.solving import Solver
from service.state import AppState

__all__ = ["GCPausedRoute", "equilibrium_router", "failure_problem", "gc_paused", "json_response", "loads_like_json"]

_log = logging.getLogger("protolyte.errors")

_SLUG_BY_KIND = {"input": "input-error", "solve": "solve-failed", "unreachable": "unreachable-setpoint"}


def failure_problem(failure: StreamFailure, prefix: str) -> BatchItemError:
    """A batch item's problem object for a core failure (pointer scoped by ``prefix``)."""
    slug = _SLUG_BY_KIND.get(failure.kind, "input-error")
    errors = (
        [FieldError(pointer=prefix + failure.field, detail=failure.message, code=failure.reason or None)]
        if failure.kind == "input"
        else None
    )
    reason = failure.reason if failure.kind != "input" else None
    return BatchItemError(ok=False, error=make_problem(422, slug, failure.message, errors=errors, reason=reason))


def json_response(content: Any) -> Response:
    """``application/json`` from plain data, serialised once by orjson.

    The routes build exactly their declared ``response_model``'s JSON form as dicts
    (``service.convert.response_dict``) and return this, so FastAPI neither builds nor
    re-validates a pydantic model per species; ``response_model`` still documents them.
    """
    return Response(orjson.dumps(content), media_type="application/json")


_gc_lock = threading.Lock()
_gc_holders = 0  # requests inside gc_paused(); the collector is re-enabled when the last leaves
_gc_we_disabled = False


@contextmanager
def gc_paused() -> Iterator[None]:
    """The cyclic garbage collector off while a batch is handled (nesting and overlapping
    requests count; it is switched back on only if it was on before the first one).

    A 10 000-item batch allocates about two million container objects — the parsed body,
    the validated models, the core's records, the response dicts — that live until the
    response is built and are then freed by reference counting, not by the collector.
    With the collector on, each generation-0 pass re-traverses the ~100 000 youngest of
    them: about a dozen passes per batch, 0.2–0.4 s of a 1.5 s request
    (tests/benchmarks/bench_batch.py times the core the same way).
    """
    global _gc_holders, _gc_we_disabled
    with _gc_lock:
        if _gc_holders == 0 and gc.isenabled():
            gc.disable()
            _gc_we_disabled = True
        _gc_holders += 1
    try:
        yield
    finally:
        with _gc_lock:
            _gc_holders -= 1
            if _gc_holders == 0 and _gc_we_disabled:
                _gc_we_disabled = False
                gc.enable()


#: An integer literal orjson might not keep as Python's ``json`` does has 19 digits or
#: more (beyond 64 bits orjson gives a float, ``json`` an int): found as a run of 19
#: zeros once every digit is mapped to ``0`` — ~4x quicker than a regular expression on
#: a digit-dense body. Long fractions match too and merely take the ``json`` path.
_DIGITS_AS_ZERO = bytes.maketrans(b"123456789", b"000000000")
_LONG_DIGITS = b"0" * 19


def loads_like_json(body: bytes) -> Any:
    """``json.loads(body)`` — what Starlette's ``Request.json`` does — in about half the time.

    orjson parses when it can, and its value is then the one ``json.loads`` gives
    (floats are correctly rounded by both; duplicate keys: the last wins in both); for
    anything it refuses (NaN, 1e400, lone surrogates, a BOM, UTF-16, bad JSON, …) or
    might read differently (integers beyond 64 bits), ``json.loads`` runs and decides,
    so values and errors are exactly the standard library's.
    """
    if body.translate(_DIGITS_AS_ZERO).find(_LONG_DIGITS) < 0:
        try:
            return orjson.loads(body)
        except ValueError:
            pass
    return json.loads(body)


class GCPausedRoute(APIRoute):
    """An ``APIRoute`` whose body is parsed by :func:`loads_like_json` and whose work from
    then on — parse, validation, dependencies, the endpoint — runs inside
    :func:`gc_paused`. The pause starts only once the whole body has arrived, so a slow
    or stalled upload never holds the collector off. Documentation (OpenAPI), errors and
    answers are those of a plain ``APIRoute``."""

    def get_route_handler(self) -> Callable[[Request], Coroutine[Any, Any, Response]]:
        handler = super().get_route_handler()

        async def paused(request: Request) -> Response:
            with ExitStack() as pause:
                entered: list[bool] = []

                async def request_json() -> Any:  # Request.json: same caching, same errors
                    if not hasattr(request, "_json"):
                        body = await request.body()
                        if not entered:
                            pause.enter_context(gc_paused())
                            entered.append(True)
                        request._json = loads_like_json(body)
                    return request._json

                request.json = request_json  # type: ignore[method-assign]
                try:
                    return await handler(request)
                finally:
                    # the parsed body (Starlette caches it on the request, which lives until
                    # the response is sent) would otherwise be the first thing the collector
                    # traverses once it is back on — hundreds of thousands of objects
                    request.__dict__.pop("_json", None)

        return paused


def _item_error(problem: BatchItemError) -> dict[str, Any]:
    return problem.model_dump(mode="json")


def equilibrium_router(solver: Solver, batch_max_items: int) -> APIRouter:
    """The equilibrium routes bound to ``solver``."""
    router = APIRouter(tags=["equilibrium"])

    @router.post(
        "/v1/equilibrium",
        operation_id="solve_equilibrium",
        summary="Equilibrium of one stream",
        response_model=EquilibriumResponse,
        responses=ERROR_RESPONSES,
        dependencies=[Depends(require_json)],
    )
    async def solve_equilibrium(stream: Stream, state: AppState = Depends(require_ready)) -> Response:
        """pH, speciation, ionic strength, buffer capacity and alkalinity of one stream."""
        errors = structural_errors(stream)
        if errors:
            raise ProblemError(422, summarise(errors), slug="validation-error", errors=errors)
        result = await solver.solve(to_spec(stream))
        return json_response(response_dict(result, state.version))

    async def solve_equilibrium_batch(
        batch: BatchRequest, state: AppState = Depends(require_ready)
    ) -> Response:
        """Solve every item with one vectorized core call; an item that fails, fails alone, in place."""
        slots: list[dict[str, Any] | None] = [None] * len(batch.items)
        to_solve: list[int] = []
        for i, stream in enumerate(batch.items):
            errors = structural_errors(stream, prefix=f"/items/{i}")
            if errors:
                problem = make_problem(422, "validation-error", summarise(errors), errors=errors)
                slots[i] = _item_error(BatchItemError(ok=False, error=problem))
                solver.metrics.observe_failure("invalid_input")
            else:
                to_solve.append(i)
        results = await solver.solve_many([to_spec(batch.items[i]) for i in to_solve]) if to_solve else []

        def encode() -> bytes:  # in a worker thread: a 10 000-item answer is ~25 MB of JSON
            failed = len(batch.items) - len(to_solve)
            for i, r in zip(to_solve, results):
                if isinstance(r, StreamFailure):
                    slots[i] = _item_error(failure_problem(r, prefix=f"/items/{i}"))
                    failed += 1
                    continue
                try:
                    slots[i] = {"ok": True, "result": response_dict(r, state.version)}
                except NonFiniteResult:
                    _log.error("non-finite result from the core", extra={"error_type": "NonFiniteResult"})
                    slots[i] = _item_error(BatchItemError(
                        ok=False,
                        error=make_problem(500, "internal-error", "The solver produced a non-finite number for this item (a defect, logged)."),
                    ))
                    failed += 1
            out = [s for s in slots if s is not None]
            return orjson.dumps({"results": out, "succeeded": len(out) - failed, "failed": failed})

        return Response(await anyio.to_thread.run_sync(encode), media_type="application/json")

    router.add_api_route(
        "/v1/equilibrium/batch",
        solve_equilibrium_batch,
        methods=["POST"],
        operation_id="solve_equilibrium_batch",
        summary="Equilibrium of many streams in one call",
        response_model=BatchResponse,
        responses=ERROR_RESPONSES,
        dependencies=[Depends(require_json), Depends(batch_cap(batch_max_items))],
        route_class_override=GCPausedRoute,
    )
    return router
