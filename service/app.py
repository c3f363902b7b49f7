"""The app factory: ``create_app(settings, core)``; ``service.app:app`` is the ASGI app."""

from __future__ import annotations

import gc
import math
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from time import perf_counter
from typing import Any

import anyio.to_thread
from fastapi import Depends, FastAPI
from fastapi.middleware.cors import CORSMiddleware

from service.auth import API_KEY_HEADER, api_key_dependency
from service.coalesce import Coalescer
from service.core import Core, default_core
from service.fastpath import EquilibriumFastPath
from service.logging import configure_logging
from service.metrics import Metrics
from service.middleware import REQUEST_ID_HEADER, BodyLimitMiddleware, RequestContextMiddleware
from service.openapi import build_openapi
from service.problems import install_problem_handlers
from service.routes_catalog import catalog_router
from service.routes_dosing import dosing_router
from service.routes_equilibrium import equilibrium_router
from service.routes_ops import ops_router
from service.settings import Settings
from service.solving import Solver
from service.state import AppState, service_version

__all__ = ["create_app", "app"]

#: Cyclic-GC thresholds of a serving process. A 10 000-item batch allocates millions of
#: short-lived, acyclic objects (freed by reference counting); at CPython's default
#: (700, 10, 10) the collector rescans the growing heap dozens of times and doubled the
#: batch's wall time (tests/benchmarks/bench_batch.py). Startup objects are frozen out.
_GC_THRESHOLDS: tuple[int, int, int] = (100_000, 50, 100)


def _tune_gc() -> None:
    """Freeze what startup allocated and raise the collector's thresholds (process-wide)."""
    gc.collect()
    gc.freeze()
    gc.set_threshold(*_GC_THRESHOLDS)


class ProtolyteAPI(FastAPI):
    """FastAPI with the equilibrium fast path in front of its middleware stack.

    A request the fast path takes is answered without the (pass-through, on its success
    path) error, telemetry and body-limit layers; anything else, FastAPI's own native
    telemetry being on (read at most once per ``TELEMETRY_RECHECK_S``), or a solve that
    raises, goes through the whole stack as before.
    """

    edge: EquilibriumFastPath | None = None
    #: How long [s] a reading of FastAPI's native-telemetry switch is trusted. Reading it
    #: asks the OpenTelemetry globals (and the environment) three times, about 9 µs of a
    #: fast-path request; a provider configured later is seen within this time.
    TELEMETRY_RECHECK_S = 1.0
    _telemetry_on = False
    _telemetry_read_at = -math.inf

    def _telemetry_enabled(self) -> bool:
        now = perf_counter()
        if now - self._telemetry_read_at >= self.TELEMETRY_RECHECK_S:
            self._telemetry_on = bool(self._native_telemetry.enabled())
            self._telemetry_read_at = now
        return self._telemetry_on

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        edge = self.edge
        if (
            edge is not None
            and scope["type"] == "http"
            and "fastapi.telemetry" not in scope
            and edge.takes(scope)
            and not self._telemetry_enabled()
        ):
            if self.middleware_stack is None:
                self.middleware_stack = self.build_middleware_stack()
            scope["app"] = self
            await edge.serve(scope, receive, send, super().__call__)
            return
        await super().__call__(scope, receive, send)


def create_app(settings: Settings | None = None, core: Core | None = None) -> FastAPI:
    """Build the service; ``settings`` default to the environment, ``core`` to ``models``."""
    settings = settings or Settings.from_env()
    core = core or default_core()
    state = AppState(core)
    metrics = Metrics(version=state.version)
    coalescer = (
        Coalescer(core.solve_many, settings.coalesce_max_batch, metrics.observe_group, settings.coalesce_wait_ms / 1e3)
        if settings.coalesce
        else None
    )

    @asynccontextmanager
    async def lifespan(_: FastAPI) -> AsyncIterator[None]:
        configure_logging(settings.log_level)
        await anyio.to_thread.run_sync(state.ensure_loaded)
        metrics.set_build_info(str(state.database.version))
        _tune_gc()
        if coalescer is not None:
            await coalescer.start()
        try:
            yield
        finally:
            if coalescer is not None:
                await coalescer.stop()

    app = ProtolyteAPI(
        title="Protolyte",
        version=service_version(),
        lifespan=lifespan,
        redirect_slashes=False,
    )
    app.state.protolyte = state
    app.state.metrics = metrics
    app.state.settings = settings
    install_problem_handlers(app)

    auth = [Depends(api_key_dependency(settings.api_key))]
    solver = Solver(core, metrics, settings.solve_time_budget_s, coalescer)
    equilibrium = equilibrium_router(solver, settings.batch_max_items)
    app.include_router(equilibrium, dependencies=auth)
    version = core.reagents_version() if core.reagents_version else None
    app.include_router(
        catalog_router(with_reagents=core.load_reagents is not None, reagents_version=version),
        dependencies=auth,
    )
    if core.dosing is not None:
        app.include_router(dosing_router(solver, core.dosing), dependencies=auth)
    app.include_router(ops_router(metrics))

    if settings.cors_origins:
        app.add_middleware(
            CORSMiddleware,
            allow_origins=list(settings.cors_origins),
            allow_methods=["GET", "POST"],
            allow_headers=["Content-Type", API_KEY_HEADER, REQUEST_ID_HEADER],
            expose_headers=[REQUEST_ID_HEADER],
        )
    app.add_middleware(BodyLimitMiddleware, limit=settings.body_limit_bytes)
    fast_path_options = {
        "solver": solver,
        "state": state,
        "fastapi_app": app,
        "route": next(r for r in equilibrium.routes if getattr(r, "path", None) == "/v1/equilibrium"),
        "body_limit": settings.body_limit_bytes,
        "api_key": settings.api_key,
        "cors": bool(settings.cors_origins),
    }
    fast_path = settings.fast_path and not app.root_path and getattr(app, "max_body_size", None) is None
    if fast_path:  # inside the request id / access log / metrics: answers the edge's solve errors
        app.add_middleware(EquilibriumFastPath, **fast_path_options)
    app.add_middleware(RequestContextMiddleware, metrics=metrics)
    if fast_path:  # unused first argument: serve() is given the whole app to fall back to
        app.edge = EquilibriumFastPath(app, **fast_path_options, metrics=metrics)

    def openapi() -> dict[str, Any]:
        return build_openapi(
            app, api_key_required=settings.api_key is not None, batch_max_items=settings.batch_max_items
        )

    app.openapi = openapi  # type: ignore[method-assign]
    return app


app = create_app()
