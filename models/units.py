"""Concentration units of an analysis line, converted to amounts [mol/L or mol/kg].

The API accepts a closed set of unit strings (``UNITS``). Each is converted by an
explicit factor built from formula masses (``models.masses``, IUPAC 2021 abridged
atomic weights); pint is used only in the tests, as an independent check.

Conventions (the same sentences are in ``UNIT_CONVENTIONS`` for the API docs):

* ``mol/L``, ``mmol/L``, ``umol/L``, ``mol/kg``, ``mmol/kg`` – amount of the entity: the
  ion itself, or a system's total over all its protonation states. The two per-kg units
  give mol/kg (see ``is_per_kg``); the caller converts with the solution density.
* ``mg/L``, ``g/L`` – mass of ``formula``: the ion itself for a strong ion, the system's
  mass-basis formula (given by the caller, e.g. NH3 for ammonia) for a system.
* ``meq/L`` – strong ion: mmol/L × |charge|. Alkalinity: milliequivalents of acid to the
  end point, as such. A system: refused (its equivalents depend on pH, so ambiguous).
* ``mg/L as CaCO3`` – strong ions and alkalinity on the equivalent basis: 1 meq/L =
  M(CaCO3)/2 mg/L = 50.04 mg/L (Standard Methods 2320). The carbonate system on the
  molar basis: 1 mol CaCO3 per mol of inorganic carbon. Other systems: refused.
* ``mg/L as N`` (P, C, S) – mass of that element: amount = mg / (M(element) × atoms of
  the element per formula unit), only for entities whose ``as_atoms`` has the element.
* Alkalinity accepts only ``meq/L``, ``mmol/L`` (read as mmol of H+ per litre, i.e.
  meq/L) and ``mg/L as CaCO3``; its amount is returned in eq/L [mol H+/L].

Range checks (non-negative, finite) belong to the caller; conversion is linear.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from models.errors import InputError
from models.masses import formula_mass_g_mol

__all__ = [
    "UNITS",
    "KINDS",
    "UNIT_CONVENTIONS",
    "CACO3_G_PER_EQ",
    "is_per_kg",
    "allowed_units",
    "conversion_factor",
    "to_mol_per_l",
]

UNITS: tuple[str, ...] = (
    "mol/L",
    "mmol/L",
    "umol/L",
    "mol/kg",
    "mmol/kg",
    "mg/L",
    "g/L",
    "meq/L",
    "mg/L as CaCO3",
    "mg/L as N",
    "mg/L as P",
    "mg/L as C",
    "mg/L as S",
)
#: What an analysis line can be: a strong ion, an acid–base system total, or alkalinity.
KINDS: tuple[str, ...] = ("strong_ion", "system", "alkalinity")

UNIT_CONVENTIONS: dict[str, str] = {
    "mol/L": "Moles per litre of the ion, or of a system's total over all protonation states.",
    "mmol/L": (
        "Millimoles per litre of the ion or system total; for alkalinity, millimoles of H+ "
        "per litre to the end point (numerically meq/L)."
    ),
    "umol/L": "Micromoles per litre of the ion or system total.",
    "mol/kg": "Moles per kilogram of water (molality) of the ion or system total.",
    "mmol/kg": "Millimoles per kilogram of water (molality) of the ion or system total.",
    "mg/L": (
        "Milligrams per litre of the ion itself, or of a system's mass-basis formula "
        "(its most protonated neutral or parent form unless the system's docs say otherwise)."
    ),
    "g/L": "Grams per litre, on the same mass basis as mg/L.",
    "meq/L": (
        "Milliequivalents per litre: for an ion, mmol/L times the ion's charge; for "
        "alkalinity, meq of acid to the end point. Not accepted for acid-base systems "
        "(their equivalents depend on pH)."
    ),
    "mg/L as CaCO3": (
        "For ions (hardness) and alkalinity: equivalents expressed as CaCO3, "
        "1 meq/L = 50.04 mg/L as CaCO3 (Standard Methods 2320). For the carbonate system: "
        "1 mol CaCO3 per mol of inorganic carbon. Not accepted for other systems."
    ),
    "mg/L as N": "Milligrams of nitrogen per litre, for species that contain nitrogen.",
    "mg/L as P": "Milligrams of phosphorus per litre, for species that contain phosphorus.",
    "mg/L as C": "Milligrams of carbon per litre, for species that contain carbon.",
    "mg/L as S": "Milligrams of sulfur per litre, for species that contain sulfur.",
}

#: Equivalent weight of CaCO3 [g/eq] = M(CaCO3)/2, from IUPAC 2021 atomic weights.
CACO3_G_PER_EQ: float = formula_mass_g_mol("CaCO3") / 2.0

_MOLAR: dict[str, float] = {
    "mol/L": 1.0,
    "mmol/L": 1e-3,
    "umol/L": 1e-6,
    "mol/kg": 1.0,
    "mmol/kg": 1e-3,
}
_MASS: dict[str, float] = {"mg/L": 1e-3, "g/L": 1.0}  # [g/L per unit]
_AS_ELEMENT: dict[str, str] = {f"mg/L as {el}": el for el in ("N", "P", "C", "S")}
_ALKALINITY_UNITS: tuple[str, ...] = ("meq/L", "mmol/L", "mg/L as CaCO3")
_HINTS: dict[str, str] = {
    "ppm": "for dilute water 1 ppm is 1 mg/L; send it as mg/L",
    "ppb": "1 ppb is 1 µg/L; send it as mg/L (value / 1000)",
    "M": "send molar concentrations as mol/L",
    "mM": "send millimolar concentrations as mmol/L",
    "µmol/L": "write micromoles as umol/L",
    "µM": "write micromoles as umol/L",
}


def is_per_kg(unit: str) -> bool:
    """True for the units that give an amount per kilogram of water (molal) (mol/kg, mmol/kg)."""
    return unit in ("mol/kg", "mmol/kg")


def _is_carbonate(name: str) -> bool:
    return name.strip().lower() == "carbonate"


def allowed_units(kind: str, as_atoms: Mapping[str, int], name: str) -> tuple[str, ...]:
    """The units that fit an entity, in the order of ``UNITS``.

    ``as_atoms`` maps element symbols to atoms per formula unit (e.g. {"N": 1} for ammonia);
    ``name`` identifies the carbonate system, the only system given as CaCO3.
    """
    if kind == "alkalinity":
        return _ALKALINITY_UNITS
    if kind not in ("strong_ion", "system"):
        raise ValueError(f"kind must be one of {KINDS}, not {kind!r}")
    out: list[str] = [*_MOLAR, *_MASS]
    if kind == "strong_ion":
        out += ["meq/L", "mg/L as CaCO3"]
    elif _is_carbonate(name):
        out.append("mg/L as CaCO3")
    out += [u for u, el in _AS_ELEMENT.items() if as_atoms.get(el, 0) > 0]
    return tuple(out)


def _or_list(units: tuple[str, ...]) -> str:
    return units[0] if len(units) == 1 else ", ".join(units[:-1]) + " or " + units[-1]


def conversion_factor(
    unit: str,
    *,
    kind: str,
    formula: str,
    charge: int,
    as_atoms: Mapping[str, int],
    name: str,
) -> float:
    """Factor f with amount = value × f [mol/L, mol/kg for per-kg units, eq/L for alkalinity].

    Raises InputError (``field`` left empty for the caller) for an unknown unit or one
    that does not fit the entity; see the module docstring for each convention.
    """
    if unit not in UNITS:
        hint = _HINTS.get(unit.strip())
        raise InputError(
            f"'{unit}' is not a unit Protolyte accepts"
            + (f" ({hint})" if hint else "")
            + f"; use one of: {', '.join(UNITS)}"
        )
    fits = allowed_units(kind, as_atoms, name)
    if unit not in fits:
        if unit == "meq/L" and kind == "system":
            why = " (the equivalents of an acid-base system depend on pH, so meq/L is ambiguous)"
        else:
            why = ""
        raise InputError(f"{name} cannot be given in {unit}{why}; use {_or_list(fits)}")
    if kind == "alkalinity":
        if unit == "mg/L as CaCO3":
            return 1e-3 / CACO3_G_PER_EQ
        return 1e-3  # meq/L, and mmol/L read as mmol H+ per litre
    if unit in _MOLAR:
        return _MOLAR[unit]
    if unit in _MASS:
        if not formula:
            raise InputError(f"{name} has no mass basis formula, so it cannot be given in {unit}")
        return _MASS[unit] / formula_mass_g_mol(formula)
    if unit in _AS_ELEMENT:
        element = _AS_ELEMENT[unit]
        return 1e-3 / (formula_mass_g_mol(element) * as_atoms[element])
    if unit == "mg/L as CaCO3" and kind == "system":  # carbonate: molar basis
        return 1e-3 / formula_mass_g_mol("CaCO3")
    if charge == 0:
        raise InputError(f"{name} has no charge, so it cannot be given in {unit}")
    meq_factor = 1e-3 / abs(charge)  # meq/L → mol/L of the ion
    if unit == "meq/L":
        return meq_factor
    return meq_factor / CACO3_G_PER_EQ  # mg/L as CaCO3 → meq/L → mol/L


def to_mol_per_l(
    value: float | np.ndarray,
    unit: str,
    *,
    kind: str,
    formula: str,
    charge: int,
    as_atoms: Mapping[str, int],
    name: str,
) -> np.ndarray:
    """Convert ``value`` in ``unit`` to an amount [mol/L; mol/kg if ``is_per_kg(unit)``].

    ``kind`` is "strong_ion", "system" or "alkalinity" (alkalinity comes back in eq/L);
    ``formula`` is the mass basis for mg/L and g/L; ``charge`` [-] the ion's charge;
    ``as_atoms`` the element counts per formula unit for the "mg/L as X" units.
    Vectorized: ``value`` may be any array; a scalar gives a 0-d array.
    """
    factor = conversion_factor(
        unit, kind=kind, formula=formula, charge=charge, as_atoms=as_atoms, name=name
    )
    out = np.array(value, dtype=float)
    out *= factor
    return out
