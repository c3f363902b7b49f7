"""Mixing of streams by flow-weighted totals.

Each stream is first solved on its own (so a stream open to CO2 or calibrated to a
measured pH contributes the totals it really has); the mixture's totals are then
C_mix = Σ Q_i C_i / Σ Q_i [mol/L] (volumes additive), its temperature the
flow-weighted mean (equal heat capacities: within a few tenths of a kelvin for
aqueous streams, common practice), and the mixture is solved closed to any gas.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

from models.equilibrium import solve_many
from models.errors import InputError, SolveError
from models.results import EquilibriumResult, StreamFailure
from models.stream import CustomSystem, Entry, StreamSpec
from models.thermo import ThermoDatabase, load_database

__all__ = ["Blend", "blend"]


@dataclass(frozen=True)
class Blend:
    """The mixed stream as an analysis (mol/L) and its equilibrium."""

    total_flow_m3_h: float
    mixed: StreamSpec
    result: EquilibriumResult
    warnings: list[str] = field(default_factory=list)


def _customs(specs: Sequence[StreamSpec]) -> tuple[CustomSystem, ...]:
    seen: dict[str, CustomSystem] = {}
    for i, spec in enumerate(specs):
        for j, cs in enumerate(spec.custom_systems):
            if cs.name in seen and seen[cs.name] != cs:
                raise InputError(
                    f"custom system {cs.name!r} is declared differently in two streams",
                    f"/streams/{i}/stream/custom_systems/{j}",
                )
            seen[cs.name] = cs
    return tuple(seen.values())


def blend(
    streams: Sequence[tuple[float, StreamSpec]], db: ThermoDatabase | None = None
) -> Blend:
    """Mix (flow [m³/h], stream) pairs and solve the mixture."""
    db = db or load_database()
    if not streams:
        raise InputError("a blend needs at least one stream", "/streams")
    flows = [float(q) for q, _ in streams]
    for i, q in enumerate(flows):
        if not q > 0:
            raise InputError("each stream's flow must be more than 0 m³/h", f"/streams/{i}/flow_m3_h")
    specs = [s for _, s in streams]
    customs = _customs(specs)
    solved = solve_many(specs, db)
    for i, res in enumerate(solved):
        if isinstance(res, StreamFailure):
            if res.kind == "input":
                raise InputError(res.message, f"/streams/{i}/stream{res.field}")
            raise SolveError(f"stream {i} does not solve on its own: {res.message}", res.reason)
    total_q = sum(flows)
    mix: dict[str, float] = {}
    strong = set(db.strong_ions)
    warnings: list[str] = []
    for q, res in zip(flows, solved):
        assert isinstance(res, EquilibriumResult)
        for sp in res.species:
            if sp.name in strong:
                mix[sp.name] = mix.get(sp.name, 0.0) + q * sp.mol_l / total_q
        for sysres in res.systems:
            mix[sysres.name] = mix.get(sysres.name, 0.0) + q * sysres.total_mol_l / total_q
    if any(s.co2_partial_pressure_atm is not None for s in specs):
        warnings.append("streams open to CO2 enter with their equilibrium carbonate; the mixture is solved closed")
    models = {s.activity_model for s in specs}
    if len(models) > 1:
        warnings.append(f"streams use different activity models; the mixture uses {specs[0].activity_model}")
    temperature = sum(q * s.temperature_c for q, s in zip(flows, specs)) / total_q
    # a weighted mean lies within its inputs; round-off must not push 100 °C to 100.00000000000001
    temperature = min(max(temperature, min(s.temperature_c for s in specs)), max(s.temperature_c for s in specs))
    mixed = StreamSpec(
        composition=tuple(Entry(name, value, "mol/L") for name, value in mix.items()),
        temperature_c=temperature,
        activity_model=specs[0].activity_model,
        custom_systems=customs,
    )
    out = solve_many([mixed], db)[0]
    if isinstance(out, StreamFailure):
        raise SolveError(f"the mixture does not solve: {out.message}", out.reason)
    return Blend(total_q, mixed, out, warnings)
