"""Thermodynamic database: acid–base systems, strong ions, gas and solid constants.

Everything numeric comes from ``models/data/thermo.toml`` (each number with its source).
Constants are thermodynamic (I = 0), molal standard state, 0.1 MPa; pK = −log10 K.
Temperature dependence: the published fit where the file gives one (evaluated also outside
its range; see :meth:`SystemData.extrapolated_steps`), else van 't Hoff with ΔCp = 0.
"""

from __future__ import annotations

import math
import re
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import cache
from importlib import resources
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from models import water
from models.errors import InputError

__all__ = [
    "TemperatureFit",
    "Step",
    "SystemData",
    "StrongIon",
    "HenryConstant",
    "ThermoDatabase",
    "load_database",
    "read_database_file",
    "species_charge",
    "van_t_hoff_pk",
]

#: Gas constant [J/(mol K)] (CODATA 2018) and the reference temperature [K].
R_J_MOL_K = 8.314462618
T_REF_K = 298.15
#: Ion size used when a charged species has no Kielland value [Å].
DEFAULT_ION_SIZE = 4.0
#: Accepted range of custom pKa values [-].
CUSTOM_PKA_RANGE = (-5.0, 25.0)

_LOGK_TERMS = ("a", "b", "c", "d", "e", "f", "g")
_CHARGE_RE = re.compile(r"([+-])(\d*)$")


@cache
def read_database_file() -> dict[str, Any]:
    """The parsed thermo.toml (cached; treat as read-only)."""
    text = resources.files("models").joinpath("data/thermo.toml").read_text(encoding="utf-8")
    return tomllib.loads(text)


def species_charge(species: str) -> int:
    """Charge from a system species' suffix: "HCO3-" → −1, "CO3-2" → −2, "NH4+" → +1 [-].

    Only the suffix style of thermo.toml; strong-ion names such as "Ca2+" carry their
    charge in :class:`StrongIon` instead ("NH4+" vs "Ca2+" is ambiguous by text alone).
    """
    m = _CHARGE_RE.search(species)
    if m is None:
        return 0
    return (1 if m.group(1) == "+" else -1) * (int(m.group(2)) if m.group(2) else 1)


def van_t_hoff_pk(
    pka_25c: float, delta_h_kj_mol: float, temperature_c: ArrayLike
) -> NDArray[np.float64]:
    """pK(T) from pK(25 °C) and ΔrH° [kJ/mol] with ΔCp = 0 [-]."""
    t_k = np.asarray(temperature_c, dtype=np.float64) + water.KELVIN
    slope = delta_h_kj_mol * 1000.0 / (R_J_MOL_K * math.log(10.0))
    return pka_25c + slope * (1.0 / t_k - 1.0 / T_REF_K)


@dataclass(frozen=True)
class TemperatureFit:
    """A published pK(T) or log K(T) equation (T in K inside the fit)."""

    form: str
    coefficients: dict[str, float]
    tmin_c: float
    tmax_c: float
    source: str

    def pk(self, temperature_c: ArrayLike) -> NDArray[np.float64]:
        """pK = −log10 K at ``temperature_c`` [°C] [-]; also outside [tmin_c, tmax_c]."""
        t = np.asarray(temperature_c, dtype=np.float64) + water.KELVIN
        c = self.coefficients
        if self.form == "pk_abc":
            return c.get("a", 0.0) / t + c.get("b", 0.0) + c.get("c", 0.0) * t
        if self.form == "logk_poly":
            g = {k: c.get(k, 0.0) for k in _LOGK_TERMS}
            logk = (
                g["a"] + g["b"] * t + g["c"] / t + g["d"] * np.log10(t)
                + g["e"] / t**2 + g["f"] * t**2 + g["g"] * np.log(t)
            )
            return -logk
        raise ValueError(f"unknown fit form {self.form!r}")

    def covers(self, temperature_c: float) -> bool:
        """True when ``temperature_c`` [°C] is inside the fit's range."""
        return self.tmin_c <= temperature_c <= self.tmax_c


@dataclass(frozen=True)
class Step:
    """One dissociation step: pKa(25 °C) [-], ΔrH° [kJ/mol], source, provenance, fit."""

    pka_25c: float
    delta_h_kj_mol: float
    source: str
    provenance: str
    fit: TemperatureFit | None

    def pk(self, temperature_c: ArrayLike) -> NDArray[np.float64]:
        """pKa at ``temperature_c`` [°C] [-]: the fit, else van 't Hoff."""
        if self.fit is not None:
            return self.fit.pk(temperature_c)
        return van_t_hoff_pk(self.pka_25c, self.delta_h_kj_mol, temperature_c)


@dataclass(frozen=True)
class SystemData:
    """An acid–base system; species most protonated first, charges parallel to species."""

    name: str
    species: tuple[str, ...]
    charges: tuple[int, ...]
    top_charge: int
    mass_formula: str
    as_atoms: dict[str, int]
    mass_basis_note: str
    steps: tuple[Step, ...]
    ion_size_angstrom: tuple[float, ...]
    notes: str
    builtin: bool

    @property
    def n_steps(self) -> int:
        """Number of dissociation steps (= len(species) − 1)."""
        return len(self.steps)

    def pka(self, temperature_c: ArrayLike) -> NDArray[np.float64]:
        """Thermodynamic molal pKa, shape ``np.shape(temperature_c) + (n_steps,)`` [-]."""
        t = np.asarray(temperature_c, dtype=np.float64)
        return np.stack([step.pk(t) for step in self.steps], axis=-1)

    def extrapolated_steps(self, temperature_c: float) -> tuple[int, ...]:
        """Indices of steps whose fit is used outside its [tmin_c, tmax_c] range."""
        return tuple(
            i for i, s in enumerate(self.steps)
            if s.fit is not None and not s.fit.covers(float(temperature_c))
        )


@dataclass(frozen=True)
class StrongIon:
    """A non-protolysing ion: å [Å] (Kielland), λ° per unit charge [S cm²/mol] at 25 °C."""

    name: str
    formula: str
    charge: int
    ion_size_angstrom: float
    limiting_conductivity_s_cm2_mol: float
    source: str


@dataclass(frozen=True)
class HenryConstant:
    """Henry constant KH = m(aq)/p(gas) [mol/(kg·atm)].

    ``temperature_coefficient_k`` = d ln KH / d(1/T) [K] (= −ΔsolH°/R, Sander 2015 convention),
    used as van 't Hoff when there is no fit.
    """

    gas: str
    kh_25c_mol_kg_atm: float
    temperature_coefficient_k: float
    source: str
    provenance: str
    fit: TemperatureFit | None = None

    def kh(self, temperature_c: ArrayLike) -> NDArray[np.float64]:
        """KH at ``temperature_c`` [°C] [mol/(kg·atm)]."""
        if self.fit is not None:
            return 10.0 ** (-self.fit.pk(temperature_c))
        t_k = np.asarray(temperature_c, dtype=np.float64) + water.KELVIN
        slope = self.temperature_coefficient_k
        return self.kh_25c_mol_kg_atm * np.exp(slope * (1.0 / t_k - 1.0 / T_REF_K))


def _fit(raw: dict[str, Any] | None) -> TemperatureFit | None:
    if raw is None:
        return None
    coeffs = {k: float(raw[k]) for k in _LOGK_TERMS if k in raw}
    form = str(raw["form"])
    if form not in ("pk_abc", "logk_poly"):
        raise ValueError(f"thermo.toml: unknown fit form {form!r}")
    return TemperatureFit(form, coeffs, float(raw["tmin_c"]), float(raw["tmax_c"]), raw["source"])


def _system(raw: dict[str, Any]) -> SystemData:
    species = tuple(raw["species"])
    top = int(raw["top_charge"])
    charges = tuple(top - k for k in range(len(species)))
    sizes = tuple(float(x) for x in raw["ion_size_angstrom"])
    steps = tuple(
        Step(float(s["pka_25c"]), float(s["delta_h_kj_mol"]), s["source"], s["provenance"],
             _fit(s.get("fit")))
        for s in raw["step"]
    )
    name = raw["name"]
    if [species_charge(s) for s in species] != list(charges):
        raise ValueError(f"thermo.toml: species charges of {name!r} do not match top_charge")
    if len(steps) != len(species) - 1 or len(sizes) != len(species):
        raise ValueError(f"thermo.toml: {name!r} needs len(species) - 1 steps and one size each")
    return SystemData(
        name=name, species=species, charges=charges, top_charge=top,
        mass_formula=raw["mass_formula"], as_atoms={k: int(v) for k, v in raw["as_atoms"].items()},
        mass_basis_note=raw["mass_basis_note"], steps=steps, ion_size_angstrom=sizes,
        notes=raw.get("notes", ""), builtin=True,
    )


def _fit_dict(fit: TemperatureFit | None) -> dict[str, Any] | None:
    if fit is None:
        return None
    return {"form": fit.form, "coefficients": dict(fit.coefficients), "tmin_c": fit.tmin_c,
            "tmax_c": fit.tmax_c, "source": fit.source}


def _custom_species(name: str, charge: int) -> str:
    return f"{name}(0)" if charge == 0 else f"{name}({charge:+d})"


@dataclass
class ThermoDatabase:
    """The loaded database; build with :func:`load_database`."""

    version: str
    standard_state: str
    systems: dict[str, SystemData]
    strong_ions: dict[str, StrongIon]
    henry: dict[str, HenryConstant]
    _co2_log_kh: TemperatureFit = field(repr=False)
    _calcite_log_ksp: TemperatureFit = field(repr=False)
    _ion_sizes: dict[str, float] = field(repr=False)
    _conductivity: dict[str, float] = field(repr=False)

    def pkw(self, temperature_c: ArrayLike) -> NDArray[np.float64]:
        """pKw, molal, 0.101325 MPa [-] (IAPWS R11-07; see :func:`models.water.pkw_molal`)."""
        return water.pkw_molal(temperature_c)

    def log_kh_co2(self, temperature_c: ArrayLike) -> NDArray[np.float64]:
        """log10 KH(CO2) [log10 mol/(kg·atm)]; Plummer & Busenberg (1982)."""
        return -self._co2_log_kh.pk(temperature_c)

    def pksp_calcite(self, temperature_c: ArrayLike) -> NDArray[np.float64]:
        """pKsp of calcite [-]; Plummer & Busenberg (1982)."""
        return self._calcite_log_ksp.pk(temperature_c)

    def ion_size(self, species: str) -> float:
        """Kielland ion size [Å] of any species or strong ion; 4.0 when unknown."""
        return self._ion_sizes.get(species, DEFAULT_ION_SIZE)

    def limiting_conductivity(self, species: str) -> float | None:
        """λ° at 25 °C per unit charge [S cm²/mol], or None when not in the database."""
        return self._conductivity.get(species)

    def onsager_limiting_law_25c(self) -> tuple[float, float]:
        """Onsager coefficients (b1 [(L/mol)^0.5], b2 [S cm²/mol (L/mol)^0.5]) at 25 °C:
        Λ = Λ° − (b1 Λ° + b2) √c; Robinson & Stokes (1959)."""
        raw = read_database_file()["conductivity"]["onsager_25c"]
        return float(raw["b1"]), float(raw["b2"])

    def custom_system(
        self,
        name: str,
        pka: Sequence[float],
        top_charge: int,
        delta_h_kj_mol: Sequence[float] | None,
    ) -> SystemData:
        """A user-declared n-protic system; species ``name(0)``, ``name(-1)``, …

        Raises :class:`models.errors.InputError` for an empty, non-finite, non-increasing
        or out-of-range ([-5, 25]) pKa list, or a ΔH list of the wrong length.
        """
        pk = _validated_pka(name, pka)
        dh = _validated_delta_h(name, delta_h_kj_mol, len(pk))
        if not name or name != name.strip():
            raise InputError(f"custom system name {name!r} must be non-empty without spaces")
        if name in self.systems or name in self.strong_ions:
            raise InputError(f"custom system name {name!r} is already a built-in name")
        if isinstance(top_charge, bool) or int(top_charge) != top_charge or abs(top_charge) > 6:
            raise InputError(f"custom system {name!r}: top_charge must be an integer in [-6, 6]")
        charges = tuple(int(top_charge) - k for k in range(len(pk) + 1))
        steps = tuple(
            Step(p, h, "user-supplied (custom system)", "USER", None) for p, h in zip(pk, dh)
        )
        return SystemData(
            name=name, species=tuple(_custom_species(name, z) for z in charges), charges=charges,
            top_charge=int(top_charge), mass_formula="", as_atoms={},
            mass_basis_note="custom system: no mass basis, use molar units (mol/L, mmol/L, meq/L)",
            steps=steps,
            ion_size_angstrom=tuple(0.0 if z == 0 else DEFAULT_ION_SIZE for z in charges),
            notes="user-declared; van 't Hoff temperature dependence (ΔCp = 0)", builtin=False,
        )

    def as_public_dict(self) -> dict[str, Any]:
        """JSON-ready summary for GET /v1/systems: systems, strong ions, water, gases."""
        raw = read_database_file()
        return {
            "database_version": self.version,
            "standard_state": self.standard_state,
            "systems": [_system_dict(s, self) for s in self.systems.values()],
            "strong_ions": [
                {"name": i.name, "formula": i.formula, "charge": i.charge,
                 "ion_size_angstrom": i.ion_size_angstrom,
                 "limiting_conductivity_s_cm2_mol": i.limiting_conductivity_s_cm2_mol,
                 "source": i.source}
                for i in self.strong_ions.values()
            ],
            "water": {k: {"source": v["source"], "provenance": v["provenance"]}
                      for k, v in raw["water"].items()},
            "henry": [
                {"gas": h.gas, "kh_25c_mol_kg_atm": h.kh_25c_mol_kg_atm,
                 "temperature_coefficient_k": h.temperature_coefficient_k, "source": h.source,
                 "provenance": h.provenance, "fit": _fit_dict(h.fit)}
                for h in self.henry.values()
            ],
            "calcite": {"pksp_25c": float(self.pksp_calcite(25.0)),
                        "fit": _fit_dict(self._calcite_log_ksp)},
        }


def _system_dict(s: SystemData, db: ThermoDatabase) -> dict[str, Any]:
    return {
        "name": s.name, "species": list(s.species), "charges": list(s.charges),
        "top_charge": s.top_charge, "mass_formula": s.mass_formula,
        "mass_basis_note": s.mass_basis_note, "as_atoms": dict(s.as_atoms),
        "ion_size_angstrom": list(s.ion_size_angstrom),
        "limiting_conductivity_s_cm2_mol": {
            sp: db.limiting_conductivity(sp) for sp in s.species
            if db.limiting_conductivity(sp) is not None
        },
        "notes": s.notes,
        "steps": [
            {"pka_25c": st.pka_25c, "delta_h_kj_mol": st.delta_h_kj_mol, "source": st.source,
             "provenance": st.provenance, "fit": _fit_dict(st.fit)}
            for st in s.steps
        ],
    }


def _validated_pka(name: str, pka: Sequence[float]) -> tuple[float, ...]:
    try:
        pk = tuple(float(p) for p in pka)
    except (TypeError, ValueError):
        raise InputError(f"custom system {name!r}: pka must be a list of numbers") from None
    lo, hi = CUSTOM_PKA_RANGE
    if not pk:
        raise InputError(f"custom system {name!r}: pka must list at least one value")
    if not all(math.isfinite(p) and lo <= p <= hi for p in pk):
        raise InputError(f"custom system {name!r}: every pKa must be a number in [{lo:g}, {hi:g}]")
    if any(b <= a for a, b in zip(pk, pk[1:])):
        raise InputError(
            f"custom system {name!r}: pKa values must be strictly increasing (most acidic first)"
        )
    return pk


def _validated_delta_h(
    name: str, delta_h: Sequence[float] | None, n: int
) -> tuple[float, ...]:
    if delta_h is None:
        return (0.0,) * n
    try:
        dh = tuple(float(h) for h in delta_h)
    except (TypeError, ValueError):
        raise InputError(f"custom system {name!r}: delta_h_kj_mol must be numbers") from None
    if len(dh) != n:
        raise InputError(
            f"custom system {name!r}: delta_h_kj_mol has {len(dh)} values, pka has {n}"
        )
    if not all(math.isfinite(h) and abs(h) <= 200.0 for h in dh):
        raise InputError(f"custom system {name!r}: each ΔH must be within ±200 kJ/mol")
    return dh


def _ion_sizes(systems: dict[str, SystemData], ions: dict[str, StrongIon],
               raw: dict[str, Any]) -> dict[str, float]:
    sizes = {k: float(v) for k, v in raw["water"]["ions"]["ion_size_angstrom"].items()}
    for s in systems.values():
        sizes.update(zip(s.species, s.ion_size_angstrom))
    sizes.update({i.name: i.ion_size_angstrom for i in ions.values()})
    return sizes


@cache
def load_database() -> ThermoDatabase:
    """Load and cache models/data/thermo.toml as a :class:`ThermoDatabase`."""
    raw = read_database_file()
    systems = {s.name: s for s in (_system(r) for r in raw["system"])}
    ions = {
        r["name"]: StrongIon(r["name"], r["formula"], int(r["charge"]),
                             float(r["ion_size_angstrom"]),
                             float(r["limiting_conductivity_s_cm2_mol"]), r["source"])
        for r in raw["strong_ion"]
    }
    co2_fit = _fit(raw["co2"]["log_kh"])
    assert co2_fit is not None
    henry = {"CO2": HenryConstant(
        "CO2", float(10.0 ** -co2_fit.pk(25.0)), _fit_slope_over_r(co2_fit),
        raw["co2"]["source"], raw["co2"]["provenance"], co2_fit)}
    for r in raw["henry"]:
        henry[r["gas"]] = HenryConstant(
            r["gas"], float(r["kh_25c_mol_kg_atm"]), float(r["temperature_coefficient_k"]),
            r["source"], r["provenance"])
    conductivity = {r["species"]: float(r["lambda_s_cm2_mol"]) for r in raw["conductivity"]["ion"]}
    conductivity.update({i.name: i.limiting_conductivity_s_cm2_mol for i in ions.values()})
    calcite = _fit(raw["calcite"]["log_ksp"])
    assert calcite is not None
    return ThermoDatabase(
        version=raw["database"]["version"], standard_state=raw["database"]["standard_state"],
        systems=systems, strong_ions=ions, henry=henry, _co2_log_kh=co2_fit,
        _calcite_log_ksp=calcite, _ion_sizes=_ion_sizes(systems, ions, raw),
        _conductivity=conductivity,
    )


def _fit_slope_over_r(fit: TemperatureFit) -> float:
    """d ln K / d(1/T) at 25 °C of a fit [K] (central difference)."""
    h = 0.01
    t1, t2 = 25.0 - h, 25.0 + h
    lnk1, lnk2 = (-float(fit.pk(t)) * math.log(10.0) for t in (t1, t2))
    inv1, inv2 = 1.0 / (t1 + water.KELVIN), 1.0 / (t2 + water.KELVIN)
    return (lnk2 - lnk1) / (inv2 - inv1)
