"""Unversioned operational routes: /healthz, /readyz, /metrics (not in the OpenAPI document)."""

from __future__ import annotations

from fastapi import APIRouter, Request, Response

from service.metrics import CONTENT_TYPE_LATEST, Metrics
from service.problems import ProblemError
from service.state import AppState

__all__ = ["ops_router"]


def ops_router(metrics: Metrics) -> APIRouter:
    """Liveness, readiness and the Prometheus exposition."""
    router = APIRouter(include_in_schema=False)

    @router.get("/healthz")
    def healthz() -> dict[str, str]:
        """Liveness: the process answers."""
        return {"status": "ok"}

    @router.get("/readyz")
    def readyz(request: Request) -> dict[str, str]:
        """Readiness: data loaded and the self-test solve passed."""
        state: AppState = request.app.state.protolyte
        if not state.ready:
            raise ProblemError(
                503,
                "Not ready: the database is loading or the start-up self-test failed.",
                slug="not-ready",
                headers={"Retry-After": "5"},
            )
        return {"status": "ready", "database_version": str(state.database.version), "version": state.version}

    @router.get("/metrics")
    def metrics_endpoint() -> Response:
        """Prometheus text exposition."""
        return Response(content=metrics.exposition(), media_type=CONTENT_TYPE_LATEST)

    return router
