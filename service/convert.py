"""Translate between the HTTP schemas and the core's plain records."""

from __future__ import annotations

import math
from collections.abc import Iterable
from operator import attrgetter
from typing import Any

from models.records import slot_builder
from models.results import EquilibriumResult
from models.stream import CustomSystem, Entry, StreamSpec
from service.schemas import EquilibriumResponse, Stream

__all__ = [
    "NonFiniteResult",
    "from_spec",
    "require_finite",
    "response_dict",
    "to_response",
    "to_spec",
]


class NonFiniteResult(RuntimeError):
    """The core returned a non-finite number as a result: a defect, never sent as data."""


_new_entry = slot_builder(Entry)
_new_custom = slot_builder(CustomSystem)
_new_spec = slot_builder(StreamSpec)


def to_spec(stream: Stream) -> StreamSpec:
    """The core's input record for a validated stream."""
    gas = stream.gas
    measured = stream.measured_ph
    customs = stream.custom_systems
    return _new_spec(
        composition=tuple([_new_entry(e.name, float(e.value), e.unit) for e in stream.composition]),
        temperature_c=float(stream.temperature_c),
        activity_model=stream.activity_model,
        custom_systems=tuple([
            _new_custom(
                c.name,
                tuple([float(p) for p in c.pka]),
                int(c.top_charge),
                None if c.delta_h_kj_mol is None else tuple([float(h) for h in c.delta_h_kj_mol]),
            )
            for c in customs
        ]) if customs else (),
        co2_partial_pressure_atm=None if gas is None else float(gas.co2_partial_pressure_atm),
        measured_ph=None if measured is None else float(measured),
        balance_on=stream.balance_on,
    )


def from_spec(spec: StreamSpec) -> Stream:
    """A core stream record as a request-shaped :class:`Stream` (e.g. a blend's mixture)."""
    return Stream.model_validate(
        {
            "temperature_c": float(spec.temperature_c),
            "activity_model": spec.activity_model,
            "composition": [{"name": e.name, "value": float(e.value), "unit": e.unit} for e in spec.composition],
            "custom_systems": [
                {
                    "name": c.name,
                    "pka": [float(p) for p in c.pka],
                    "top_charge": int(c.top_charge),
                    "delta_h_kj_mol": None if c.delta_h_kj_mol is None else [float(h) for h in c.delta_h_kj_mol],
                }
                for c in spec.custom_systems
            ],
            "gas": None
            if spec.co2_partial_pressure_atm is None
            else {"co2_partial_pressure_atm": float(spec.co2_partial_pressure_atm)},
            "measured_ph": spec.measured_ph,
            "balance_on": spec.balance_on,
        }
    )


def require_finite(*values: float | None) -> None:
    """Raise :class:`NonFiniteResult` when a result number is NaN or infinite."""
    if not _finite(values):
        raise NonFiniteResult("the core returned a non-finite number in a result")


def _finite(values: Iterable[float | None]) -> bool:
    return all(v is None or math.isfinite(v) for v in values)


_MOL = attrgetter("mol_l")
_ACTIVITY = attrgetter("activity")
_GAMMA = attrgetter("activity_coefficient")


def _sum_is_finite(r: EquilibriumResult) -> bool:
    """True only if every number :func:`_check_finite` checks is finite, by summing them:
    a NaN or an infinity makes the sum non-finite. False (then the exact check decides)
    also when the sum overflows or a value is not a plain number."""
    try:
        a = r.alkalinity
        t = (
            r.ph + r.ionic_strength_mol_l + r.buffer_capacity_mmol_l_per_ph + r.charge_balance_residual_mol_l
            + a.total_meq_l + a.total_mg_l_as_caco3 + a.phenolphthalein_meq_l + a.phenolphthalein_mg_l_as_caco3
        )
        for v in (r.calcite_saturation_index, r.langelier_index, r.conductivity_estimate_us_cm):
            if v is not None:
                t += v
        species = r.species
        t += sum(map(_MOL, species)) + sum(map(_ACTIVITY, species)) + sum(map(_GAMMA, species))
        for s in r.systems:
            t += s.total_mol_l + sum(s.fractions.values())
        return math.isfinite(t)
    except Exception:  # noqa: BLE001 — None where a number is expected, …: the exact check decides
        return False


def _check_finite(r: EquilibriumResult) -> None:
    if _sum_is_finite(r):
        return
    a = r.alkalinity
    scalars = [
        r.ph, r.ionic_strength_mol_l, r.buffer_capacity_mmol_l_per_ph,
        r.charge_balance_residual_mol_l, r.calcite_saturation_index, r.langelier_index,
        r.conductivity_estimate_us_cm, a.total_meq_l, a.total_mg_l_as_caco3,
        a.phenolphthalein_meq_l, a.phenolphthalein_mg_l_as_caco3,
    ]
    species = [x for s in r.species for x in (s.mol_l, s.activity, s.activity_coefficient)]
    fractions = [f for s in r.systems for f in (s.total_mol_l, *s.fractions.values())]
    if not (_finite(scalars) and _finite(species) and _finite(fractions)):
        raise NonFiniteResult("the solver returned a non-finite number in a result")


def response_dict(r: EquilibriumResult, service_version: str) -> dict[str, Any]:
    """The HTTP response for one solved stream as plain JSON-ready data; refuses non-finite numbers.

    Exactly what ``EquilibriumResponse(...).model_dump(mode="json")`` gives (same keys,
    order and leaf types; ``tests/test_service_fast_json.py`` pins it), without building
    a pydantic model per species: batches serialise these dicts once with orjson.
    """
    _check_finite(r)
    a = r.alkalinity
    cal = r.calibration
    return {
        "ph": r.ph,
        "temperature_c": r.temperature_c,
        "ionic_strength_mol_l": r.ionic_strength_mol_l,
        "buffer_capacity_mmol_l_per_ph": r.buffer_capacity_mmol_l_per_ph,
        "alkalinity": {
            "total_meq_l": a.total_meq_l,
            "total_mg_l_as_caco3": a.total_mg_l_as_caco3,
            "total_endpoint_ph": a.total_endpoint_ph,
            "phenolphthalein_meq_l": a.phenolphthalein_meq_l,
            "phenolphthalein_mg_l_as_caco3": a.phenolphthalein_mg_l_as_caco3,
            "phenolphthalein_endpoint_ph": a.phenolphthalein_endpoint_ph,
        },
        "species": [
            {
                "name": s.name,
                "charge": s.charge,
                "mol_l": s.mol_l,
                "activity": s.activity,
                "activity_coefficient": s.activity_coefficient,
            }
            for s in r.species
        ],
        "systems": [
            {
                "name": s.name,
                "total_mol_l": s.total_mol_l,
                "fractions": dict(s.fractions),
                "open_to_gas": bool(s.open_to_gas),
            }
            for s in r.systems
        ],
        "charge_balance_residual_mol_l": r.charge_balance_residual_mol_l,
        "calcite_saturation_index": r.calcite_saturation_index,
        "langelier_index": r.langelier_index,
        "conductivity_estimate_us_cm": r.conductivity_estimate_us_cm,
        "calibration": None
        if cal is None
        else {
            "balance_on": cal.balance_on,
            "added_mol_l": cal.added_mol_l,
            "carbonate_from_alkalinity_mol_l": cal.carbonate_from_alkalinity_mol_l,
        },
        "warnings": list(r.warnings),
        "model": {
            "database_version": r.database_version,
            "activity_model": r.activity_model,
            "solver_iterations": int(r.iterations),
            "service_version": service_version,
        },
    }


def to_response(r: EquilibriumResult, service_version: str) -> EquilibriumResponse:
    """The HTTP response model for one solved stream; refuses non-finite numbers."""
    return EquilibriumResponse.model_validate(response_dict(r, service_version))
