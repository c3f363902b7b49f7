"""Complete dosing answers: dose, product quantities, process gain, hazards, safety note.

This is what the /v1/dose, /v1/titration-curve and /v1/blend routes return, assembled
from the numerics in ``models.dosing`` and ``models.blend``; the service only maps it
to JSON.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from models.blend import Blend, blend
from models.dosing import SETPOINT_TOLERANCE_PH, DoseCurve, DosePlan, dose_curve, dosed_spec, plan_doses
from models.equilibrium import solve
from models.errors import InputError
from models.hazards import Hazard, assess, concentrated_reagent
from models.reagents import Reagent, custom_reagent, load_reagents, product_amounts
from models.results import EquilibriumResult
from models.stream import StreamSpec
from models.thermo import ThermoDatabase, load_database

__all__ = [
    "SAFETY_NOTE",
    "ReagentChoice",
    "DoseAdvice",
    "CurveAdvice",
    "BlendAdvice",
    "resolve_reagent",
    "advise_dose",
    "advise_doses",
    "advise_curve",
    "advise_blend",
]

#: Present on every dosing, titration-curve and blend answer.
SAFETY_NOTE = (
    "Advisory calculation only. Any dosing change must be reviewed and confirmed by the "
    "plant's licensed operators before it is made; local codes, permits and the plant's "
    "own procedures govern. Do not connect these outputs to final control elements "
    "without the plant's own interlocks."
)


@dataclass(frozen=True)
class ReagentChoice:
    """A reagent and the product strength (and purity) it is delivered at."""

    reagent: Reagent
    strength_pct_w: float
    purity_pct_w: float | None = None


@dataclass(frozen=True)
class DoseAdvice:
    reagent: str
    setpoint_ph: float
    initial_ph: float
    final_ph: float
    dose_mmol_l: float
    amounts: dict[str, float | None]
    process_gain_ph_per_mmol_l: float
    process_gain_ph_per_l_h: float | None
    reachable_ph: tuple[float, float]
    already_met: bool
    final: EquilibriumResult
    hazards: list[Hazard]
    warnings: list[str]
    safety_note: str = SAFETY_NOTE


@dataclass(frozen=True)
class CurveAdvice:
    reagent: str
    curve: DoseCurve
    hazards: list[Hazard]
    safety_note: str = SAFETY_NOTE


@dataclass(frozen=True)
class BlendAdvice:
    blend: Blend
    hazards: list[Hazard]
    warnings: list[str] = field(default_factory=list)
    safety_note: str = SAFETY_NOTE


def resolve_reagent(
    name: str,
    *,
    strength_pct_w: float | None = None,
    purity_pct_w: float | None = None,
    custom: dict | None = None,
) -> ReagentChoice:
    """A catalogue reagent by name, or a custom one from its definition."""
    if custom is not None:
        db = load_database()
        r = custom_reagent(
            name,
            custom["adds"],
            custom["kind"],
            formula=custom.get("formula"),
            molar_mass_g_mol=custom.get("molar_mass_g_mol"),
            strength_pct_w=strength_pct_w if strength_pct_w is not None else 100.0,
            density_kg_l=custom.get("density_kg_l"),
            known_systems=tuple(db.systems),
        )
        return ReagentChoice(r, r.default_strength_pct_w)
    catalogue = load_reagents()
    if name not in catalogue:
        raise InputError(
            f"unknown reagent {name!r}; built-in reagents are {', '.join(catalogue)} "
            "(or define a custom one)",
            "/reagent/name",
        )
    r = catalogue[name]
    strength = r.default_strength_pct_w if strength_pct_w is None else float(strength_pct_w)
    try:
        r.check_strength(strength)
    except InputError as exc:
        raise InputError(exc.message, "/reagent/strength_pct_w") from None
    return ReagentChoice(r, strength, purity_pct_w)


def _amounts(plan_mmol: float, choice: ReagentChoice, temperature_c: float, flow: float | None):
    try:
        return product_amounts(
            plan_mmol, choice.reagent, choice.strength_pct_w, temperature_c, flow,
            purity_pct_w=choice.purity_pct_w,
        )
    except InputError as exc:
        raise InputError(exc.message, exc.field or "/reagent") from None


def _advice(
    plan: DosePlan, choice: ReagentChoice, setpoint: float, flow: float | None, db: ThermoDatabase
) -> DoseAdvice:
    r = choice.reagent
    dose_mmol = plan.dose_mol_l * 1e3
    product_t = 20.0
    amounts = _amounts(dose_mmol, choice, product_t, flow)
    gain_mmol = plan.gain_ph_per_mol_l / 1e3
    gain_lh: float | None = None
    # dose [mmol/L] = q [L/h] · c [mol/L of product] / Q [m³/h]: d(dose)/dq = c / Q.
    if flow and amounts.get("density_kg_l"):
        unit = _amounts(1.0, choice, product_t, flow)  # per 1 mmol/L of dose
        if unit["product_l_h"]:
            gain_lh = gain_mmol / unit["product_l_h"]
    final = solve(plan.final_spec, db)
    hazards = assess(final, db) + concentrated_reagent(r.kind, r.form, choice.strength_pct_w, r.name)
    warnings = list(plan.warnings) + list(final.warnings)
    if plan.already_met:
        warnings.append(
            f"the stream is already at pH {plan.initial_ph:.3f}, within "
            f"{SETPOINT_TOLERANCE_PH} of the setpoint {setpoint:.3f}: no {r.name} is needed"
        )
    return DoseAdvice(
        reagent=r.name,
        setpoint_ph=setpoint,
        initial_ph=plan.initial_ph,
        final_ph=plan.final_ph,
        dose_mmol_l=dose_mmol,
        amounts=amounts,
        process_gain_ph_per_mmol_l=gain_mmol,
        process_gain_ph_per_l_h=gain_lh,
        reachable_ph=plan.reachable_ph,
        already_met=plan.already_met,
        final=final,
        hazards=hazards,
        warnings=warnings,
    )


def advise_doses(
    specs: Sequence[StreamSpec],
    choice: ReagentChoice,
    setpoint_ph: float,
    flow_m3_h: float | None = None,
    db: ThermoDatabase | None = None,
) -> list[DoseAdvice | Exception]:
    """Dose advice for many streams to one setpoint (one vectorized dose solve)."""
    db = db or load_database()
    plans = plan_doses(specs, choice.reagent, setpoint_ph, db)
    out: list[DoseAdvice | Exception] = []
    for plan in plans:
        if isinstance(plan, Exception):
            out.append(plan)
            continue
        try:
            out.append(_advice(plan, choice, setpoint_ph, flow_m3_h, db))
        except InputError as exc:
            out.append(exc)
    return out


def advise_dose(
    spec: StreamSpec,
    choice: ReagentChoice,
    setpoint_ph: float,
    flow_m3_h: float | None = None,
    db: ThermoDatabase | None = None,
) -> DoseAdvice:
    """Dose advice for one stream; raises the stream's error."""
    res = advise_doses([spec], choice, setpoint_ph, flow_m3_h, db)[0]
    if isinstance(res, Exception):
        if isinstance(res, InputError) and res.field and not res.field.startswith(("/reagent", "/stream")):
            raise InputError(res.message, "/stream" + res.field)
        raise res
    return res


def advise_curve(
    spec: StreamSpec,
    choice: ReagentChoice,
    max_dose_mmol_l: float,
    points: int,
    db: ThermoDatabase | None = None,
) -> CurveAdvice:
    """Titration curve from 0 to ``max_dose_mmol_l`` in ``points`` equal steps."""
    db = db or load_database()
    doses = np.linspace(0.0, max_dose_mmol_l * 1e-3, int(points))
    try:
        curve = dose_curve(spec, choice.reagent, doses, db)
    except InputError as exc:
        raise InputError(exc.message, "/stream" + exc.field) from None
    end = solve(dosed_spec(spec, choice.reagent, float(doses[-1])), db)
    hazards = assess(end, db) + concentrated_reagent(
        choice.reagent.kind, choice.reagent.form, choice.strength_pct_w, choice.reagent.name
    )
    return CurveAdvice(choice.reagent.name, curve, hazards)


def advise_blend(
    streams: Sequence[tuple[float, StreamSpec]], db: ThermoDatabase | None = None
) -> BlendAdvice:
    """Mixture of streams with hazards of the mixed state."""
    db = db or load_database()
    b = blend(streams, db)
    return BlendAdvice(b, assess(b.result, db), list(b.warnings))
