"""Dose to a setpoint, strong acids against strong bases (ideal activity model, 25 °C).

The dose of a strong reagent follows from the charge balance alone (textbook
stoichiometry): every mole of NaOH brings one Na+, every mole of HCl one Cl-, and the
water terms [H+] and [OH-] at the setpoint are fixed by the setpoint itself. The
expected doses are derived here in closed form; outside constants used:

* pKw(25 °C) = 13.995 (molal), IAPWS R11-07 (Bandura & Lvov 2006), reference-data.md §2
  [DERIVED there from the verified R11-07 formula]. Its effect on a 1 mmol/L dose is
  ~1e-6 relative, so the third decimal of pKw does not matter at the 1e-6 tolerance.
* density of water at 25 °C = 0.997048 kg/L, IAPWS-95, reference-data.md §2 [DERIVED]
  (converts the molal [H+], [OH-] into mol/L).
* Where [H+] or [OH-] is a sizeable part of the dose (pH 2.5–4 and 10), the 1e-6 check is of
  the stoichiometry with the model's own water constants (models.water: Kell 1975 density,
  R11-07 pKw at that density; they are checked against IAPWS in the water tests); the
  rounded reference values above then agree to 2e-4 relative, checked separately.
* pKa(HSO4-) at 25 °C = 1.979, Dickson, Wesolowski, Palmer & Mesmer (1990), reference-data.md
  §4 [MEMORY, M]; the closed form uses the database's value, which is checked against it.

Ideal model: pH = −log m(H+) with m in mol/kg.
"""

from __future__ import annotations

import math

import pytest

from models import water
from models.dosing import plan_doses
from models.reagents import load_reagents
from models.stream import Entry, StreamSpec
from models.thermo import load_database

PKW_25 = 13.995  # IAPWS R11-07, reference-data.md §2
RHO_25 = 0.997048  # kg/L, IAPWS-95, reference-data.md §2
PKA_HSO4_25 = 1.979  # Dickson et al. 1990, reference-data.md §4 [MEMORY, M]
REL = 1e-6
MODEL_PKW_25 = float(water.pkw_molal(25.0))
MODEL_RHO_25 = float(water.density_kg_l(25.0))


def _ideal(*entries: tuple[str, float]) -> StreamSpec:
    return StreamSpec(tuple(Entry(n, v, "mmol/L") for n, v in entries), activity_model="ideal")


def _water_excess_mol_l(ph: float, pkw: float = PKW_25, rho: float = RHO_25) -> float:
    """[OH-] − [H+] at ``ph`` in mol/L of solution (ideal, molal → mol/L by ρ)."""
    h = 10.0 ** -ph
    oh = 10.0 ** (ph - pkw)
    return rho * (oh - h)


def _model_water_excess_mol_l(ph: float) -> float:
    return _water_excess_mol_l(ph, MODEL_PKW_25, MODEL_RHO_25)


def _plan(spec: StreamSpec, reagent: str, setpoint: float):
    plan = plan_doses([spec], load_reagents()[reagent], setpoint)[0]
    assert not isinstance(plan, Exception), plan
    return plan


def test_hydrochloric_acid_stream_needs_its_sodium_deficit_of_naoh_to_reach_ph_7() -> None:
    # textbook stoichiometry: Na+ + H+ = Cl- + OH-  ⇒  dose = Cl- − Na+ + ([OH-] − [H+])
    cl, na = 1.0e-3, 0.2e-3
    plan = _plan(_ideal(("Cl-", cl * 1e3), ("Na+", na * 1e3)), "NaOH", 7.0)
    expected = (cl - na) + _water_excess_mol_l(7.0)
    assert plan.dose_mol_l == pytest.approx(expected, rel=REL)


def test_water_terms_at_ph_7_are_resolved_not_just_the_strong_ion_deficit() -> None:
    # the [OH-] − [H+] term at pH 7 (pKw ≠ 14) is ~1.3e-6 of the dose: a dose that ignored it
    # would miss the 1e-6 tolerance, so the check above really tests the water terms
    cl, na = 1.0e-3, 0.2e-3
    plan = _plan(_ideal(("Cl-", cl * 1e3), ("Na+", na * 1e3)), "NaOH", 7.0)
    assert abs(plan.dose_mol_l / (cl - na) - 1.0) > 1e-6


def test_caustic_stream_needs_its_chloride_deficit_of_hcl_to_reach_ph_7() -> None:
    # textbook stoichiometry: Na+ + H+ = Cl- + OH-  ⇒  dose = Na+ − Cl- − ([OH-] − [H+])
    na, cl = 1.5e-3, 0.3e-3
    plan = _plan(_ideal(("Na+", na * 1e3), ("Cl-", cl * 1e3)), "HCl", 7.0)
    expected = (na - cl) - _water_excess_mol_l(7.0)
    assert plan.dose_mol_l == pytest.approx(expected, rel=REL)


@pytest.mark.parametrize("setpoint", [4.0, 10.0])
def test_strong_base_dose_away_from_neutral_includes_the_free_h_or_oh(setpoint: float) -> None:
    # textbook stoichiometry; at pH 4 and 10 the water terms are 10 % of the dose
    cl = 1.0e-3
    plan = _plan(_ideal(("Cl-", cl * 1e3)), "NaOH", setpoint)
    assert plan.dose_mol_l == pytest.approx(cl + _model_water_excess_mol_l(setpoint), rel=REL)


@pytest.mark.parametrize("setpoint", [4.0, 10.0])
def test_strong_base_dose_away_from_neutral_agrees_with_the_rounded_reference_constants(
    setpoint: float,
) -> None:
    # pKw 13.995 is given to 3 decimals (±0.0005 → ±0.12 % in [OH-], 10 % of the dose at pH 10)
    cl = 1.0e-3
    plan = _plan(_ideal(("Cl-", cl * 1e3)), "NaOH", setpoint)
    assert plan.dose_mol_l == pytest.approx(cl + _water_excess_mol_l(setpoint), rel=2e-4)


def test_nitric_acid_and_hydrochloric_acid_need_the_same_moles() -> None:
    # textbook stoichiometry: both are monoprotic strong acids (one anion per mole)
    stream = _ideal(("Na+", 2.0), ("Cl-", 0.5))
    hcl = _plan(stream, "HCl", 6.5).dose_mol_l
    hno3 = _plan(stream, "HNO3", 6.5).dose_mol_l
    assert hno3 == pytest.approx(hcl, rel=REL)


def test_lime_needs_half_the_moles_of_caustic() -> None:
    # textbook stoichiometry: Ca(OH)2 brings two OH- (one Ca2+) per mole
    stream = _ideal(("Cl-", 2.0))
    naoh = _plan(stream, "NaOH", 7.5).dose_mol_l
    lime = _plan(stream, "Ca(OH)2", 7.5).dose_mol_l
    assert lime == pytest.approx(naoh / 2.0, rel=REL)


def test_database_bisulfate_pka_is_the_published_value() -> None:
    # Dickson et al. (1990) 1.979 at 25 °C [MEMORY, M]; M&S/CRC print 1.99
    pka = float(load_database().systems["sulfate"].pka(25.0)[0])
    assert pka == pytest.approx(PKA_HSO4_25, abs=0.012)


@pytest.mark.parametrize("setpoint", [7.0, 3.0, 2.5])
def test_sulfuric_acid_dose_counts_the_second_proton_through_the_bisulfate_equilibrium(
    setpoint: float,
) -> None:
    # Derivation (textbook stoichiometry + the HSO4- = H+ + SO4 2- equilibrium, ideal):
    # sulfate total S per litre is split α(HSO4-) = h/(h+Ka), α(SO4 2-) = Ka/(h+Ka); the charge
    # balance Na+ + ρ h = S (α1 + 2 α2) + ρ [OH-] gives
    #     S = (Na+ − ρ([OH-] − h)) · (h + Ka) / (h + 2 Ka).
    # At pH 7 S ≈ Na+/2 (both protons free); at pH 2.5 a third of the sulfate is HSO4-.
    ka = 10.0 ** -float(load_database().systems["sulfate"].pka(25.0)[0])
    na = 1.0e-3
    plan = _plan(_ideal(("Na+", na * 1e3)), "H2SO4", setpoint)
    h = 10.0 ** -setpoint
    expected = (na - _model_water_excess_mol_l(setpoint)) * (h + ka) / (h + 2.0 * ka)
    assert plan.dose_mol_l == pytest.approx(expected, rel=REL)


def test_sulfuric_acid_at_ph_3_needs_more_than_half_the_moles_of_hcl() -> None:
    # the second proton is partly held back as HSO4- at pH 3 (pKa ≈ 2): more H2SO4 than
    # the naive diprotic count of half the HCl dose (textbook: bisulfate is a weak acid)
    stream = _ideal(("Na+", 1.0))
    hcl = _plan(stream, "HCl", 3.0).dose_mol_l
    h2so4 = _plan(stream, "H2SO4", 3.0).dose_mol_l
    ratio = h2so4 / (hcl / 2.0)
    h, ka = 1e-3, 10.0 ** -PKA_HSO4_25
    assert ratio > 1.02
    assert ratio == pytest.approx(2.0 * (h + ka) / (h + 2.0 * ka), rel=0.01)


def test_final_ph_of_a_strong_dose_is_the_setpoint() -> None:
    plan = _plan(_ideal(("Cl-", 1.0)), "NaOH", 9.0)
    assert math.isclose(plan.final_ph, 9.0, abs_tol=1e-3)
    assert plan.initial_ph == pytest.approx(3.0, abs=0.01)  # 1 mM HCl (textbook)
