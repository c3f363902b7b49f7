"""POST /v1/dose, /v1/titration-curve and /v1/blend, served from ``models.advice``.

Registered only when the core has its dosing layer (a route that exists works).
"""

from __future__ import annotations

import dataclasses
from typing import Any

from fastapi import APIRouter, Depends

from service.checks import structural_errors
from service.convert import from_spec, require_finite, to_response, to_spec
from service.core import Dosing
from service.deps import require_json, require_ready
from service.dosing_schemas import (
    BlendRequest,
    BlendResponse,
    DoseRequest,
    DoseResponse,
    EquivalencePoint,
    Hazard,
    ReagentRef,
    TitrationPoint,
    TitrationRequest,
    TitrationResponse,
)
from service.openapi import ERROR_RESPONSES
from service.problems import FieldError, ProblemError, summarise
from service.schemas import Stream
from service.solving import Solver
from service.state import AppState

__all__ = ["dosing_router"]


def _check(*streams: tuple[Stream, str]) -> None:
    errors: list[FieldError] = []
    for stream, prefix in streams:
        errors += structural_errors(stream, prefix=prefix)
    if errors:
        raise ProblemError(422, summarise(errors), slug="validation-error", errors=errors)


def _hazards(items: Any) -> list[Hazard]:
    return [Hazard(**dataclasses.asdict(h)) for h in items]


def _choice(dosing: Dosing, ref: ReagentRef) -> Any:
    custom = None if ref.custom is None else ref.custom.model_dump()
    return dosing.resolve_reagent(ref.name, strength_pct_w=ref.strength_pct_w, purity_pct_w=ref.purity_pct_w, custom=custom)


def dosing_router(solver: Solver, dosing: Dosing) -> APIRouter:
    """The dosing routes bound to ``solver`` and the core's ``dosing`` layer."""
    router = APIRouter(tags=["dosing"], dependencies=[Depends(require_json)])

    @router.post(
        "/v1/dose",
        operation_id="dose_to_setpoint",
        summary="Reagent dose that brings a stream to a pH setpoint",
        response_model=DoseResponse,
        responses=ERROR_RESPONSES,
    )
    async def dose_to_setpoint(req: DoseRequest, state: AppState = Depends(require_ready)) -> DoseResponse:
        """Dose in mmol/L, mg/L and product quantities, final pH, process gain, hazards; always a safety note."""
        _check((req.stream, "/stream"))
        spec = to_spec(req.stream)

        def run() -> Any:
            return dosing.advise_dose(spec, _choice(dosing, req.reagent), req.setpoint_ph, req.flow_m3_h)

        a = await solver.call(run, "dose solve")
        amounts = a.amounts
        require_finite(a.final_ph, a.dose_mmol_l, a.process_gain_ph_per_mmol_l, a.process_gain_ph_per_l_h,
                       *[v for v in amounts.values() if isinstance(v, float)])
        return DoseResponse(
            reagent=a.reagent,
            setpoint_ph=a.setpoint_ph,
            initial_ph=a.initial_ph,
            final_ph=a.final_ph,
            dose_mmol_l=a.dose_mmol_l,
            dose_mg_l=amounts["dose_mg_l"],
            strength_pct_w=amounts["strength_pct_w"],
            purity_pct_w=amounts["purity_pct_w"],
            density_kg_l=amounts["density_kg_l"],
            product_mg_l=amounts["product_mg_l"],
            product_l_per_m3=amounts["product_l_per_m3"],
            product_l_h=amounts["product_l_h"],
            product_kg_h=amounts["product_kg_h"],
            process_gain_ph_per_mmol_l=a.process_gain_ph_per_mmol_l,
            process_gain_ph_per_l_h=a.process_gain_ph_per_l_h,
            reachable_min_ph=a.reachable_ph[0],
            reachable_max_ph=a.reachable_ph[1],
            already_met=a.already_met,
            final=to_response(a.final, state.version),
            hazards=_hazards(a.hazards),
            warnings=list(a.warnings),
            safety_note=a.safety_note,
        )

    @router.post(
        "/v1/titration-curve",
        operation_id="titration_curve",
        summary="pH and buffer capacity along increasing reagent doses",
        response_model=TitrationResponse,
        responses=ERROR_RESPONSES,
    )
    async def titration_curve(req: TitrationRequest, state: AppState = Depends(require_ready)) -> TitrationResponse:
        """The curve from zero to `max_dose_mmol_l` in `points` equal steps, with its equivalence points."""
        _check((req.stream, "/stream"))
        spec = to_spec(req.stream)

        def run() -> Any:
            return dosing.advise_curve(spec, _choice(dosing, req.reagent), req.max_dose_mmol_l, req.points)

        c = await solver.call(run, "titration curve")
        curve = c.curve
        doses = [float(d) * 1e3 for d in curve.dose_mol_l]
        phs = [float(p) for p in curve.ph]
        betas = [float(b) * 1e3 for b in curve.beta_mol_l]
        require_finite(*doses, *phs, *betas)
        return TitrationResponse(
            reagent=c.reagent,
            points=[TitrationPoint(dose_mmol_l=d, ph=p, buffer_capacity_mmol_l_per_ph=b) for d, p, b in zip(doses, phs, betas)],
            equivalence_points=[
                EquivalencePoint(dose_mmol_l=float(d) * 1e3, ph=float(p))
                for d, p in zip(curve.equivalence_dose_mol_l, curve.equivalence_ph)
            ],
            hazards=_hazards(c.hazards),
            safety_note=c.safety_note,
        )

    @router.post(
        "/v1/blend",
        operation_id="blend_streams",
        summary="Mix streams by flow and solve the mixture",
        response_model=BlendResponse,
        responses=ERROR_RESPONSES,
    )
    async def blend_streams(req: BlendRequest, state: AppState = Depends(require_ready)) -> BlendResponse:
        """The flow-weighted mixture as an analysis and its full equilibrium result."""
        _check(*[(part.stream, f"/streams/{i}/stream") for i, part in enumerate(req.streams)])
        parts = [(part.flow_m3_h, to_spec(part.stream)) for part in req.streams]
        b = await solver.call(lambda: dosing.advise_blend(parts), "blend")
        return BlendResponse(
            total_flow_m3_h=b.blend.total_flow_m3_h,
            composition=from_spec(b.blend.mixed),
            result=to_response(b.blend.result, state.version),
            hazards=_hazards(b.hazards),
            warnings=list(b.warnings),
            safety_note=b.safety_note,
        )

    return router
