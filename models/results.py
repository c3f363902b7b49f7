"""Result records of the core. Plain frozen dataclasses: the service serialises them.

Units are in the field names: ``_mol_l`` [mol/L], ``_mmol_l_per_ph`` [mmol/L per pH
unit], ``_meq_l`` [meq/L], ``_mg_l_as_caco3`` [mg/L as CaCO3], ``_us_cm`` [µS/cm].
``ph`` is on the activity scale, pH = −log10 a(H+), molal standard state.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from models.records import slot_builder

__all__ = [
    "Alkalinity",
    "Calibration",
    "EquilibriumResult",
    "SpeciesAmount",
    "StreamFailure",
    "SystemSpeciation",
]


@dataclass(frozen=True, slots=True)
class Alkalinity:
    """Alkalinity by titration with strong acid to fixed end points (Standard Methods 2320 B)."""

    total_meq_l: float
    total_mg_l_as_caco3: float
    total_endpoint_ph: float
    phenolphthalein_meq_l: float
    phenolphthalein_mg_l_as_caco3: float
    phenolphthalein_endpoint_ph: float


@dataclass(frozen=True, slots=True)
class SpeciesAmount:
    """One dissolved species at equilibrium."""

    name: str
    charge: int
    mol_l: float
    activity: float
    activity_coefficient: float


@dataclass(frozen=True, slots=True)
class SystemSpeciation:
    """An acid–base system's total and the fraction of it in each protonation state."""

    name: str
    total_mol_l: float
    fractions: dict[str, float]
    open_to_gas: bool = False


@dataclass(frozen=True, slots=True)
class Calibration:
    """What calibration to a measured pH (or alkalinity) decided."""

    balance_on: str | None
    added_mol_l: float
    carbonate_from_alkalinity_mol_l: float | None = None


@dataclass(frozen=True, slots=True)
class EquilibriumResult:
    """Equilibrium state of one stream."""

    ph: float
    temperature_c: float
    activity_model: str
    ionic_strength_mol_l: float
    buffer_capacity_mmol_l_per_ph: float
    alkalinity: Alkalinity
    species: tuple[SpeciesAmount, ...]
    systems: tuple[SystemSpeciation, ...]
    charge_balance_residual_mol_l: float
    iterations: int
    database_version: str
    calcite_saturation_index: float | None = None
    langelier_index: float | None = None
    conductivity_estimate_us_cm: float | None = None
    calibration: Calibration | None = None
    warnings: tuple[str, ...] = field(default_factory=tuple)


@dataclass(frozen=True, slots=True)
class StreamFailure:
    """A stream of a batch that could not be computed; the others are unaffected.

    ``kind`` is ``"input"`` (InputError), ``"solve"`` (SolveError) or ``"unreachable"``;
    ``reason`` is a short stable code, ``field`` a path into the stream (may be empty).
    """

    kind: str
    reason: str
    message: str
    field: str = ""


#: ``new_species(name, charge, mol_l, activity, activity_coefficient)``
new_species = slot_builder(SpeciesAmount)
#: ``new_system(name, total_mol_l, fractions, open_to_gas)``
new_system = slot_builder(SystemSpeciation)
#: ``new_result(...)``: every EquilibriumResult field (by keyword, or in declaration order)
new_result = slot_builder(EquilibriumResult)
