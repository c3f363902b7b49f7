"""Hazard flags computed from the chemistry of a final state (after dosing or mixing).

Each flag carries the value that triggered it, the threshold and its source (thresholds
in ``models/data/hazards.toml``). Gas partial pressures are the equilibrium values over
the liquid, p = m(neutral) / KH [atm], reported in ppm(v) at 1 atm total pressure: an
upper bound for a vented headspace, the right order of magnitude for a closed one.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from functools import cache
from importlib import resources
from typing import Any

from models.results import EquilibriumResult
from models.thermo import ThermoDatabase

__all__ = ["Hazard", "assess", "hazard_data"]


@dataclass(frozen=True, slots=True)
class Hazard:
    """One flag: ``severity`` is "info", "warning" or "danger"."""

    code: str
    severity: str
    message: str
    value: float | None
    threshold: float | None
    unit: str
    source: str


@cache
def hazard_data() -> dict[str, Any]:
    """The thresholds file, parsed once."""
    text = resources.files("models").joinpath("data/hazards.toml").read_text(encoding="utf-8")
    return tomllib.loads(text)


def _system(res: EquilibriumResult, name: str):
    return next((s for s in res.systems if s.name == name and s.total_mol_l > 0), None)


def _gas_flags(res: EquilibriumResult, db: ThermoDatabase) -> list[Hazard]:
    out: list[Hazard] = []
    for gas, cfg in hazard_data()["gas"].items():
        sysres = _system(res, cfg["system"])
        if sysres is None:
            continue
        frac = sysres.fractions[cfg["neutral_species"]]
        molal = next(s.mol_l for s in res.species if s.name == cfg["neutral_species"])
        ppm = float(molal / db.henry[gas].kh(res.temperature_c)) * 1e6
        value, unit = ppm, "ppm"
        if ppm >= cfg["danger_ppm"]:
            sev, thr, src = "danger", cfg["danger_ppm"], cfg["danger_source"]
        elif ppm >= cfg["warning_ppm"]:
            sev, thr, src = "warning", cfg["warning_ppm"], cfg["warning_source"]
        elif frac >= cfg["fraction_warning"]:
            # flagged on the neutral fraction: state the fraction against its threshold
            sev, thr, src = "warning", cfg["fraction_warning"], cfg["fraction_source"]
            value, unit = float(frac), "fraction"
        else:
            sev, thr, src = "info", cfg["warning_ppm"], cfg["warning_source"]
        out.append(
            Hazard(
                f"{gas.lower()}_release",
                sev,
                f"{frac:.1%} of {cfg['system']} is {cfg['neutral_species']} at pH {res.ph:.2f}; "
                f"equilibrium {gas} over the liquid ≈ {ppm:.3g} ppm",
                value,
                thr,
                unit,
                src + f"; Henry constant: {db.henry[gas].source}",
            )
        )
    return out


def _chlorine(res: EquilibriumResult) -> list[Hazard]:
    cfg = hazard_data()["chlorine"]
    hs = _system(res, cfg["system"])
    if hs is None:
        return []
    hocl = hs.fractions.get("HOCl", 0.0)
    chloride = any(s.name == "Cl-" and s.mol_l > 0 for s in res.species)
    sev, thr = "info", cfg["cl2_warning_ph"]
    if chloride and res.ph < cfg["cl2_danger_ph"]:
        sev, thr = "danger", cfg["cl2_danger_ph"]
    elif res.ph < cfg["cl2_warning_ph"]:
        sev = "warning"
    note = " with chloride present: chlorine gas can evolve" if chloride and sev != "info" else ""
    return [
        Hazard(
            "chlorine_gas",
            sev,
            f"hypochlorite is {hocl:.1%} HOCl and {1 - hocl:.1%} OCl- at pH {res.ph:.2f}{note}",
            res.ph,
            thr,
            "pH",
            cfg["source"],
        )
    ]


def _scaling(res: EquilibriumResult) -> list[Hazard]:
    cfg = hazard_data()["scaling"]
    si = res.calcite_saturation_index
    if si is None or si <= cfg["calcite_si_warning"]:
        return []
    return [
        Hazard(
            "calcite_scaling",
            "warning",
            f"calcite saturation index {si:+.2f}: the stream can deposit calcium carbonate scale",
            si,
            cfg["calcite_si_warning"],
            "SI",
            cfg["source"],
        )
    ]


def concentrated_reagent(kind: str, form: str, strength_pct_w: float, name: str) -> list[Hazard]:
    """Heat of dilution and splash for strong acid or caustic products."""
    cfg = hazard_data()["concentrated_reagent"]
    limit = cfg["acid_pct_w"] if kind == "acid" else cfg["base_pct_w"]
    if form != "solution" or strength_pct_w < limit:
        return []
    return [
        Hazard(
            "heat_of_dilution",
            "warning",
            f"{name} at {strength_pct_w:g} % w/w: strong heat of dilution and splash; add the "
            "product to water, never water to the product; dose into a well-mixed point",
            strength_pct_w,
            limit,
            "% w/w",
            cfg["source"],
        )
    ]


def assess(res: EquilibriumResult, db: ThermoDatabase) -> list[Hazard]:
    """All chemistry hazards of a final state."""
    return _gas_flags(res, db) + _chlorine(res) + _scaling(res)
