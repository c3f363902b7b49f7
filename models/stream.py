"""Plain input records for the core: a stream's analysis, as the service hands it over.

Quantities: ``temperature_c`` [°C]; ``value`` in the entry's own ``unit``;
``pka`` [-] at 25 °C, most acidic first; ``delta_h_kj_mol`` [kJ/mol] per step;
``co2_partial_pressure_atm`` [atm]; ``measured_ph`` [-, activity scale].
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["ACTIVITY_MODELS", "BALANCE_IONS", "Entry", "CustomSystem", "StreamSpec"]

#: Activity models the core knows, in one place.
ACTIVITY_MODELS: tuple[str, ...] = ("ideal", "davies", "extended_debye_huckel")
#: Strong ions that calibration may add to close the charge balance.
BALANCE_IONS: tuple[str, ...] = ("Na+", "Cl-")


@dataclass(frozen=True, slots=True)
class Entry:
    """One line of an analysis: a strong ion, an acid–base system total, or alkalinity."""

    name: str
    value: float
    unit: str


@dataclass(frozen=True, slots=True)
class CustomSystem:
    """A user-declared n-protic system (pKa at 25 °C, most acidic first)."""

    name: str
    pka: tuple[float, ...]
    top_charge: int = 0
    delta_h_kj_mol: tuple[float, ...] | None = None


@dataclass(frozen=True, slots=True)
class StreamSpec:
    """Everything needed to compute one stream's equilibrium."""

    composition: tuple[Entry, ...]
    temperature_c: float = 25.0
    activity_model: str = "davies"
    custom_systems: tuple[CustomSystem, ...] = ()
    co2_partial_pressure_atm: float | None = None
    measured_ph: float | None = None
    balance_on: str | None = None
