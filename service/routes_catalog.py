"""GET /v1/systems and GET /v1/reagents: the built-in data, with sources."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Depends

from service.catalog_schemas import ReagentsResponse, SystemsResponse
from service.deps import require_ready
from service.openapi import READ_ERROR_RESPONSES
from service.state import AppState

__all__ = ["catalog_router"]


def catalog_router(*, with_reagents: bool, reagents_version: str | None) -> APIRouter:
    """The catalogue routes (``/v1/reagents`` only when the core has a reagent catalogue)."""
    router = APIRouter(tags=["catalogue"])

    @router.get(
        "/v1/systems",
        operation_id="list_systems",
        summary="Built-in acid–base systems and strong ions",
        response_model=SystemsResponse,
        responses=READ_ERROR_RESPONSES,
    )
    def list_systems(state: AppState = Depends(require_ready)) -> Any:
        """Every built-in system with species, pKa at 25 °C, ΔH and the source of each constant."""
        return state.database.as_public_dict()

    if with_reagents:

        @router.get(
            "/v1/reagents",
            operation_id="list_reagents",
            summary="Built-in dosing reagents",
            response_model=ReagentsResponse,
            responses=READ_ERROR_RESPONSES,
        )
        def list_reagents(state: AppState = Depends(require_ready)) -> Any:
            """Every built-in reagent with active substance, formula mass, default strength and density."""
            return {
                "catalogue_version": reagents_version,
                "reagents": [r.as_public_dict() for r in state.reagents.values()],
            }

    return router
