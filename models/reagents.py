"""Reagent catalogue (models/data/reagents.toml), custom reagents and product amounts.

What a reagent does to a stream. ``adds`` lists, per mole of active substance, the strong
ions [mol] and acid–base system totals [mol] it brings; H+ and OH- are never listed. The
solver's charge balance is written over strong-ion charges and system totals only (each
total split over its protonation states by the equilibrium, with [H+] and [OH-] from the
same equilibrium), and water is in excess, so hydrogen and oxygen are not conserved
quantities. Hence the protons of an electroneutral reagent are implied: they are
whatever makes the reagent neutral, and the equilibrium decides where they go.
Checks of this reasoning:

* NaOH adds 1 Na+: +1 strong charge that only OH- (or deprotonated system forms) can
  balance, so the pH rises – a strong base. KOH, Ca(OH)2 (1 Ca2+ = 2 OH-) and Mg(OH)2 alike.
* HCl adds 1 Cl- (HNO3: 1 NO3-): −1 strong charge, balanced by H+ – a strong acid.
* H2SO4 adds 1 sulfate total and no strong ion. The sulfate system's top species is HSO4-
  (top charge −1) and SO4 2- is what remains at any process pH: two protons per mole come
  along implicitly – they are the H+ that the charge balance then requires.
* Na2CO3 adds 2 Na+ and 1 carbonate total (counted from CO2(aq), top charge 0): the form
  added, CO3 2-, carries −2 = −(2 Na+); relative to the fully protonated form the proton
  excess is −2, which is exactly "two strong cations without a strong anion".
  NaHCO3 (1 Na+ + 1 carbonate) is the same with −1. CO2 adds 1 carbonate total and no
  strong ion: a weak acid whose protons are those of H2CO3*.
So a ``proton_excess`` field would be redundant: for every neutral reagent it equals
Σ(strong-ion charge × amount) + Σ(system total × top charge of the system), fixed by
``adds`` and the system database. The volume of the product added is neglected (the
dilution of the stream by a dose is ≤ 1e-4 for common doses).

Strength (``strength_pct_w``) means, by ``form``: solution – % w/w active substance in
the solution; slurry – % w/w dry product in the slurry (the dry product has
``purity_pct_w`` active substance); solid, gas – purity of the product as delivered.
Densities [kg/L] come from the CRC Handbook table of concentrative properties at 20 °C
(values mostly [MEMORY], tagged per number in the data file); slurry densities are
derived from the solid's particle density by volume additivity.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Collection, Mapping
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np

from models.errors import InputError
from models.masses import ATOMIC_WEIGHTS_SOURCE, formula_mass_g_mol, split_charge

__all__ = [
    "REAGENT_KINDS",
    "REAGENT_FORMS",
    "STRENGTH_MEANING",
    "DENSITY_TEMPERATURE_BAND_C",
    "Reagent",
    "load_reagents",
    "catalogue_version",
    "custom_reagent",
    "product_amounts",
]

DATA_FILE = Path(__file__).with_name("data") / "reagents.toml"
REAGENT_KINDS: tuple[str, ...] = ("acid", "base")
REAGENT_FORMS: tuple[str, ...] = ("solution", "slurry", "solid", "gas")
STRENGTH_MEANING: dict[str, str] = {
    "solution": "% w/w of the active substance in the solution",
    "slurry": (
        "% w/w of dry product in the slurry (the dry product has purity_pct_w active substance)"
    ),
    "solid": "purity: % w/w of the active substance in the product as delivered",
    "gas": "purity: % w/w of the active substance in the gas as delivered",
}
#: Densities tabulated at one temperature are used within ± this band [K] of it. Thermal
#: expansion of concentrated solutions is a few 0.01 %/K, so the error stays near 1 %.
DENSITY_TEMPERATURE_BAND_C: float = 15.0
_TOL = 1e-9


@dataclass(frozen=True)
class Reagent:
    """A dosing reagent. Amounts per mole of active substance ``formula``.

    ``density_table``: (strength [% w/w], density [kg/L]) at ``density_temperature_c``
    [°C] (None: user-given, any temperature); ``solubility_table``: (temperature [°C],
    solubility [g per 100 g H2O]); ``purity_pct_w`` [% w/w] of the dry product.
    """

    name: str
    display_name: str
    formula: str
    kind: str
    form: str
    adds: dict[str, float]
    molar_mass_g_mol: float
    default_strength_pct_w: float
    strength_range_pct_w: tuple[float, float]
    purity_pct_w: float = 100.0
    density_table: tuple[tuple[float, float], ...] = ()
    density_temperature_c: float | None = 20.0
    solubility_table: tuple[tuple[float, float], ...] = ()
    sources: tuple[str, ...] = ()
    hazards: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    custom: bool = False
    provenance: dict[str, str] = field(default_factory=dict)

    @property
    def has_volume(self) -> bool:
        """True when the product is dosed by volume (solution or slurry)."""
        return self.form in ("solution", "slurry")

    def check_strength(self, strength_pct_w: float) -> None:
        """Raise InputError unless ``strength_pct_w`` [% w/w] is within the reagent's range."""
        lo, hi = self.strength_range_pct_w
        if not math.isfinite(strength_pct_w) or not lo - _TOL <= strength_pct_w <= hi + _TOL:
            span = f"{lo:g} %" if lo == hi else f"{lo:g}-{hi:g} %"
            raise InputError(
                f"{self.name} strength {strength_pct_w:g} % w/w is outside {span} w/w "
                f"({STRENGTH_MEANING[self.form]})"
            )

    def density_kg_l(self, strength_pct_w: float, temperature_c: float = 20.0) -> float:
        """Density of the product [kg/L] at ``strength_pct_w`` [% w/w] and ``temperature_c`` [°C].

        Linear interpolation (numpy.interp) in the tabulated strengths; InputError outside
        the table, beyond ± DENSITY_TEMPERATURE_BAND_C of its temperature, or for a gas/solid.
        """
        if not self.has_volume or not self.density_table:
            raise InputError(
                f"{self.name} is dosed by mass ({self.form}); it has no product density"
            )
        pct = np.array([p for p, _ in self.density_table])
        rho = np.array([r for _, r in self.density_table])
        inside = pct[0] - _TOL <= strength_pct_w <= pct[-1] + _TOL
        if not math.isfinite(strength_pct_w) or not inside:
            raise InputError(
                f"{self.name} density is known for {pct[0]:g}-{pct[-1]:g} % w/w only, "
                f"not {strength_pct_w:g} %"
            )
        t_ref = self.density_temperature_c
        if t_ref is not None and not abs(temperature_c - t_ref) <= DENSITY_TEMPERATURE_BAND_C:
            raise InputError(
                f"{self.name} density is tabulated at {t_ref:g} °C and used for "
                f"{t_ref - DENSITY_TEMPERATURE_BAND_C:g}-"
                f"{t_ref + DENSITY_TEMPERATURE_BAND_C:g} °C; "
                f"{temperature_c:g} °C is outside"
            )
        return float(np.interp(strength_pct_w, pct, rho))

    def solubility_g_per_100g_h2o(self, temperature_c: float) -> float | None:
        """Solubility [g per 100 g H2O] at ``temperature_c`` [°C]; None if not tabulated.

        InputError outside the tabulated temperatures. For Ca(OH)2 the ceiling of what a
        slurry dose can dissolve (retrograde: less in warm water).
        """
        if not self.solubility_table:
            return None
        t = np.array([x for x, _ in self.solubility_table])
        s = np.array([y for _, y in self.solubility_table])
        if not t[0] - _TOL <= temperature_c <= t[-1] + _TOL:
            raise InputError(
                f"{self.name} solubility is known for {t[0]:g}-{t[-1]:g} °C only, "
                f"not {temperature_c:g} °C"
            )
        return float(np.interp(temperature_c, t, s))

    def as_public_dict(self) -> dict[str, Any]:
        """Plain JSON-ready description for GET /v1/reagents."""
        default_density = (
            self.density_kg_l(self.default_strength_pct_w, self.density_temperature_c or 20.0)
            if self.has_volume and self.density_table
            else None
        )
        molarity = None
        if default_density is not None and self.form == "solution":
            active_g_l = default_density * 1000.0 * self.default_strength_pct_w / 100.0
            molarity = active_g_l / self.molar_mass_g_mol
        return {
            "name": self.name,
            "display_name": self.display_name,
            "active_substance": self.formula,
            "kind": self.kind,
            "form": self.form,
            "adds_per_mol": dict(self.adds),
            "molar_mass_g_mol": self.molar_mass_g_mol,
            "atomic_weights": ATOMIC_WEIGHTS_SOURCE,
            "default_strength_pct_w": self.default_strength_pct_w,
            "strength_range_pct_w": list(self.strength_range_pct_w),
            "strength_meaning": STRENGTH_MEANING[self.form],
            "purity_pct_w": self.purity_pct_w,
            "default_density_kg_l": default_density,
            "default_molarity_mol_l": molarity,
            "density_temperature_c": self.density_temperature_c if self.density_table else None,
            "density_table": [
                {"strength_pct_w": p, "density_kg_l": r} for p, r in self.density_table
            ],
            "solubility_g_per_100g_h2o": [
                {"temperature_c": t, "solubility": s} for t, s in self.solubility_table
            ],
            "hazards": list(self.hazards),
            "notes": list(self.notes),
            "sources": list(self.sources),
            "provenance": dict(self.provenance),
            "custom": self.custom,
        }


# --- validation shared by the catalogue and custom reagents ---------------------------


def _validate_adds(
    name: str, adds: Mapping[str, float], kind: str, known_systems: Collection[str] | None
) -> dict[str, float]:
    if kind not in REAGENT_KINDS:
        raise InputError(f"reagent kind must be 'acid' or 'base', not '{kind}'")
    if not adds:
        raise InputError(f"reagent {name} must add at least one strong ion or acid-base system")
    out: dict[str, float] = {}
    strong_charge = 0.0
    has_system = False
    for species, amount in adds.items():
        if not isinstance(species, str) or not species.strip():
            raise InputError(f"reagent {name}: species names must be non-empty text")
        if isinstance(amount, bool) or not isinstance(amount, (int, float)):
            raise InputError(f"reagent {name}: amount of {species} must be a number")
        if not math.isfinite(amount) or not 0.0 < amount <= 100.0:
            raise InputError(
                f"reagent {name}: {species} must be added at more than 0 "
                "and at most 100 mol per mol"
            )
        body, charge = split_charge(species)
        if charge:
            formula_mass_g_mol(body)  # a strong ion must be a real formula
            strong_charge += charge * amount
        else:
            has_system = True
            if known_systems is not None and species not in known_systems:
                raise InputError(
                    f"reagent {name}: '{species}' is neither a strong ion (like Na+ or Cl-) "
                    "nor a known acid-base system"
                )
        out[species] = float(amount)
    if not has_system:
        if abs(strong_charge) < 1e-12:
            raise InputError(
                f"reagent {name} adds a neutral salt only; it neither adds acid nor base"
            )
        if (strong_charge > 0) != (kind == "base"):
            raise InputError(
                f"reagent {name} adds net {'positive' if strong_charge > 0 else 'negative'} "
                f"strong-ion charge, so it is {'a base' if strong_charge > 0 else 'an acid'}, "
                f"not {'an acid' if kind == 'acid' else 'a base'}"
            )
    return out


def _slurry_table(
    strength: tuple[float, float], particle_kg_l: float, water_kg_l: float
) -> tuple[tuple[float, float], ...]:
    """Slurry density [kg/L] by volume additivity, 1/ρ = w/ρ_s + (1 − w)/ρ_w, 1 % steps."""
    lo, hi = strength
    grid = np.unique(np.concatenate([np.arange(math.ceil(lo), math.floor(hi) + 1.0), [lo, hi]]))
    w = grid / 100.0
    rho = 1.0 / (w / particle_kg_l + (1.0 - w) / water_kg_l)
    return tuple((float(p), float(r)) for p, r in zip(grid, rho, strict=True))


def _from_toml(name: str, raw: dict[str, Any], doc: dict[str, Any]) -> Reagent:
    sources_db: dict[str, str] = doc["sources"]
    used: list[str] = []
    provenance: dict[str, str] = {}

    def note(key: str, table: Mapping[str, Any]) -> None:
        src = table["source"]
        if src not in used:
            used.append(src)
        tag = table["provenance"] + (f", {table['confidence']}" if "confidence" in table else "")
        tags = provenance.get(key, "").split("; ") if key in provenance else []
        if tag not in tags:
            provenance[key] = "; ".join([*tags, tag])

    form = raw["form"]
    strength = raw["strength"]
    note("default_strength", strength)
    density: tuple[tuple[float, float], ...] = ()
    density_t: float | None = None
    purity = 100.0
    if form == "solution":
        rows = sorted(raw["density"], key=lambda r: r["pct_w"])
        temps = {r["temperature_c"] for r in rows}
        if len(temps) != 1:
            raise ValueError(f"{name}: density rows must share one temperature")
        density_t = float(temps.pop())
        density = tuple((float(r["pct_w"]), float(r["kg_l"])) for r in rows)
        for r in rows:
            note("density", r)
        strength_range = (density[0][0], density[-1][0])
    else:
        rng = raw["strength_range"]
        note("strength_range", rng)
        strength_range = (float(rng["min_pct_w"]), float(rng["max_pct_w"]))
    if form == "slurry":
        purity = float(raw["purity"]["default_pct_w"])
        note("purity", raw["purity"])
        water = doc["water"]["density"]
        note("density", raw["particle"])
        note("density", water)
        density_t = float(water["temperature_c"])
        density = _slurry_table(
            strength_range, float(raw["particle"]["density_kg_l"]), float(water["kg_l"])
        )
    elif form in ("solid", "gas"):
        purity = float(strength["default_pct_w"])
    solubility = tuple(
        (float(r["temperature_c"]), float(r["g_per_100g_h2o"]))
        for r in sorted(raw.get("solubility", []), key=lambda r: r["temperature_c"])
    )
    for r in raw.get("solubility", []):
        note("solubility", r)
    reagent = Reagent(
        name=name,
        display_name=raw["display_name"],
        formula=raw["formula"],
        kind=raw["kind"],
        form=form,
        adds=_validate_adds(name, raw["adds"], raw["kind"], None),
        molar_mass_g_mol=formula_mass_g_mol(raw["formula"]),
        default_strength_pct_w=float(strength["default_pct_w"]),
        strength_range_pct_w=strength_range,
        purity_pct_w=purity,
        density_table=density,
        density_temperature_c=density_t,
        solubility_table=solubility,
        sources=tuple(sources_db[k] for k in used),
        hazards=tuple(raw.get("hazards", ())),
        notes=tuple(raw.get("notes", ())),
        provenance=provenance,
    )
    reagent.check_strength(reagent.default_strength_pct_w)
    return reagent


@cache
def _document() -> dict[str, Any]:
    with DATA_FILE.open("rb") as fh:
        return tomllib.load(fh)


@cache
def load_reagents() -> dict[str, Reagent]:
    """The built-in reagents by short name ("NaOH", "Ca(OH)2", "H2SO4", …). Cached."""
    doc = _document()
    return {name: _from_toml(name, raw, doc) for name, raw in doc["reagent"].items()}


def catalogue_version() -> str:
    """Version string of the reagent data file."""
    return str(_document()["version"])


def custom_reagent(
    name: str,
    adds: Mapping[str, float],
    kind: str,
    *,
    formula: str | None = None,
    molar_mass_g_mol: float | None = None,
    strength_pct_w: float = 100.0,
    density_kg_l: float | None = None,
    known_systems: Collection[str] | None = None,
) -> Reagent:
    """A reagent from user input: active species ``adds`` [mol per mol], ``kind`` acid/base.

    Give the active substance's ``formula`` or its ``molar_mass_g_mol`` [g/mol], not both.
    With ``density_kg_l`` [kg/L] it is a solution of ``strength_pct_w`` [% w/w] dosed by
    volume; without, a solid of that purity dosed by mass. ``known_systems`` (optional)
    are the system names the adds may use. InputError on anything implausible.
    """
    if not isinstance(name, str) or not name.strip() or len(name) > 64:
        raise InputError("a custom reagent needs a name of 1 to 64 characters")
    if name in load_reagents():
        raise InputError(f"'{name}' is a built-in reagent; choose another name for a custom one")
    clean = _validate_adds(name, adds, kind, known_systems)
    if (formula is None) == (molar_mass_g_mol is None):
        raise InputError(
            f"reagent {name}: give either the formula or the molar mass of the active substance"
        )
    if formula is not None:
        mass = formula_mass_g_mol(formula)
    else:
        assert molar_mass_g_mol is not None
        if not math.isfinite(molar_mass_g_mol) or not 1.0 <= molar_mass_g_mol <= 5000.0:
            raise InputError(f"reagent {name}: molar mass must be 1-5000 g/mol")
        mass = float(molar_mass_g_mol)
    if not math.isfinite(strength_pct_w) or not 0.0 < strength_pct_w <= 100.0:
        raise InputError(f"reagent {name}: strength must be more than 0 and at most 100 % w/w")
    density: tuple[tuple[float, float], ...] = ()
    if density_kg_l is not None:
        if not math.isfinite(density_kg_l) or not 0.6 <= density_kg_l <= 2.5:
            raise InputError(f"reagent {name}: a solution density must be 0.6-2.5 kg/L")
        density = ((float(strength_pct_w), float(density_kg_l)),)
    return Reagent(
        name=name,
        display_name=name,
        formula=formula or "",
        kind=kind,
        form="solution" if density else "solid",
        adds=clean,
        molar_mass_g_mol=mass,
        default_strength_pct_w=float(strength_pct_w),
        strength_range_pct_w=(float(strength_pct_w), float(strength_pct_w)),
        purity_pct_w=100.0 if density else float(strength_pct_w),
        density_table=density,
        density_temperature_c=None,
        sources=("user input",),
        custom=True,
    )


def product_amounts(
    dose_mmol_l: float,
    reagent: Reagent,
    strength_pct_w: float | None = None,
    temperature_c: float = 20.0,
    flow_m3_h: float | None = None,
    *,
    purity_pct_w: float | None = None,
) -> dict[str, float | None]:
    """Convert a dose of active substance [mmol/L of stream] into product quantities.

    Returns dose_mg_l (active substance) [mg/L], product_mg_l [mg product per L of stream],
    product_l_per_m3 [L product per m³ of stream; None for solids and gases], and with
    ``flow_m3_h`` [m³/h] product_l_h [L/h] and product_kg_h [kg/h]; also the strength,
    purity [% w/w] and density [kg/L] used. ``temperature_c`` [°C] is the product's.
    """
    if not math.isfinite(dose_mmol_l) or dose_mmol_l < 0.0:
        raise InputError(f"dose must be zero or more mmol/L, not {dose_mmol_l:g}")
    if flow_m3_h is not None and (not math.isfinite(flow_m3_h) or flow_m3_h < 0.0):
        raise InputError(f"flow must be zero or more m³/h, not {flow_m3_h:g}")
    strength = reagent.default_strength_pct_w if strength_pct_w is None else float(strength_pct_w)
    reagent.check_strength(strength)
    dose_mg_l = dose_mmol_l * reagent.molar_mass_g_mol  # mmol/L × g/mol = mg/L
    purity = 100.0
    if reagent.form == "slurry":
        purity = reagent.purity_pct_w if purity_pct_w is None else float(purity_pct_w)
        if not math.isfinite(purity) or not 0.0 < purity <= 100.0:
            raise InputError(f"{reagent.name} purity must be more than 0 and at most 100 % w/w")
        product_mg_l = dose_mg_l / (purity / 100.0) / (strength / 100.0)
    else:
        if purity_pct_w is not None:
            raise InputError(
                f"{reagent.name} is a {reagent.form}: its strength is its purity; "
                "give strength_pct_w only"
            )
        product_mg_l = dose_mg_l / (strength / 100.0)
        purity = strength if reagent.form in ("solid", "gas") else 100.0
    density = reagent.density_kg_l(strength, temperature_c) if reagent.has_volume else None
    # g/m³ → kg/m³ → L/m³
    l_per_m3 = product_mg_l / 1000.0 / density if density is not None else None
    l_h = l_per_m3 * flow_m3_h if l_per_m3 is not None and flow_m3_h is not None else None
    return {
        "dose_mmol_l": dose_mmol_l,
        "dose_mg_l": dose_mg_l,
        "strength_pct_w": strength,
        "purity_pct_w": purity,
        "density_kg_l": density,
        "product_mg_l": product_mg_l,
        "product_l_per_m3": l_per_m3,
        "product_l_h": l_h,
        "product_kg_h": product_mg_l * flow_m3_h / 1000.0 if flow_m3_h is not None else None,
    }
