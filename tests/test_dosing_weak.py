"""A weak monoprotic acid (acetic acid) titrated with sodium hydroxide.

Outside sources, each named where used:
* Henderson–Hasselbalch at half-equivalence, pH = pKa + log(γ(A-)·[A-]/[HA]) with
  [A-] = [HA] (Harris, Quantitative Chemical Analysis, chapter "Acid–base titrations",
  weak acid–strong base; from memory).
* Equivalence point of a weak acid titrated with a strong base, dilution neglected:
  A- + H2O = HA + OH-, [OH-] = √(Kw/Ka · F) ⇒ pH = ½(pKw + pKa + log F), F the salt
  formality (Harris, Quantitative Chemical Analysis, same chapter; Skoog, West, Holler &
  Crouch, Fundamentals of Analytical Chemistry, titration curves for weak acids; both from
  memory). The model neglects the reagent's volume, so "dilution neglected" is exact here.
* pKa(acetic, 25 °C) = 4.756 (Harris QCA App. G [READ], reference-data.md §4); 50 °C: 4.787
  (Harned & Ehlers 1933 equation, reference-data.md §4 [MEMORY, H; DERIVED value]).
* pKw(25 °C) = 13.995, pKw(50 °C) = 13.264, IAPWS R11-07 (reference-data.md §2 [DERIVED]).
* Water density 0.997048 kg/L at 25 °C (IAPWS-95, reference-data.md §2): concentrations
  are molal in the activity equations (F = c / ρ).
* Davies (1962) with 0.3: log γ = −A z² (√I/(1+√I) − 0.3 I), A = 0.5098 at 25 °C
  (reference-data.md §5 [DERIVED from IAPWS R8-97 and IAPWS-95]); γ(neutral) = 1.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from models.dosing import dose_curve, plan_doses
from models.reagents import load_reagents
from models.stream import Entry, StreamSpec

PKA_ACETIC = {25.0: 4.756, 50.0: 4.787}
PKW = {25.0: 13.995, 50.0: 13.264}
RHO_25 = 0.997048
A_DH_25 = 0.5098

NAOH = load_reagents()["NaOH"]


def _acetic(c_mol_l: float, model: str, t: float = 25.0) -> StreamSpec:
    return StreamSpec((Entry("acetate", c_mol_l * 1e3, "mmol/L"),), t, model)


def _ph_at(spec: StreamSpec, dose_mol_l: float) -> float:
    return float(dose_curve(spec, NAOH, np.array([dose_mol_l])).ph[0])


def _davies_log_gamma(i_mol_kg: float, z: int = 1) -> float:
    s = math.sqrt(i_mol_kg)
    return -A_DH_25 * z * z * (s / (1.0 + s) - 0.3 * i_mol_kg)


# --- half-equivalence ---------------------------------------------------------------
# 0.1 M keeps the Henderson–Hasselbalch error ([H+] against C/2) below 0.0004 pH.


@pytest.mark.parametrize("t", [25.0, 50.0])
def test_half_equivalence_ph_is_the_pka_in_an_ideal_solution(t: float) -> None:
    c = 0.1
    assert _ph_at(_acetic(c, "ideal", t), c / 2.0) == pytest.approx(PKA_ACETIC[t], abs=0.002)


def test_half_equivalence_ph_is_the_pka_plus_log_gamma_of_acetate_with_davies() -> None:
    # I = ½(m(Na+) + m(A-)) ·… = C/2 molal at half-neutralisation (Na+ = A- = C/2)
    c = 0.1
    correction = _davies_log_gamma(c / 2.0 / RHO_25)
    ph = _ph_at(_acetic(c, "davies"), c / 2.0)
    assert ph == pytest.approx(PKA_ACETIC[25.0] + correction, abs=0.002)


def test_activity_correction_at_half_equivalence_is_not_negligible() -> None:
    # the Davies correction at I = 0.05 is ≈ −0.086: the test above tells the models apart
    c = 0.1
    shift = _ph_at(_acetic(c, "davies"), c / 2.0) - _ph_at(_acetic(c, "ideal"), c / 2.0)
    assert shift == pytest.approx(_davies_log_gamma(c / 2.0 / RHO_25), abs=0.002)
    assert shift < -0.05


def test_plan_to_the_pka_doses_half_the_acid_plus_the_free_acidity() -> None:
    # charge balance at pH = pKa (ideal): Na+ = [A-] + [OH-] − [H+] = C/2 + ρ([OH-] − [H+])
    c = 0.01
    plan = plan_doses([_acetic(c, "ideal")], NAOH, PKA_ACETIC[25.0])[0]
    assert not isinstance(plan, Exception), plan
    h = 10.0 ** -PKA_ACETIC[25.0]
    expected = c / 2.0 + RHO_25 * (10.0 ** (PKA_ACETIC[25.0] - PKW[25.0]) - h)
    # tolerance: pKa of the database vs the printed 4.756 (±0.0005 → ±0.06 % in [A-])
    assert plan.dose_mol_l == pytest.approx(expected, rel=2e-3)


# --- equivalence point ----------------------------------------------------------------


@pytest.mark.parametrize("c", [0.1, 0.01, 0.001])
def test_equivalence_ph_is_half_pkw_plus_pka_plus_log_salt_concentration(c: float) -> None:
    # Harris QCA / Skoog: pH = ½(pKw + pKa + log F) at the stoichiometric dose (ideal);
    # the formula neglects [H+] against [OH-] (≈ 0.004 pH at 1 mM, < 0.001 from 10 mM) and
    # pKw/pKa are rounded to 0.001
    expected = 0.5 * (PKW[25.0] + PKA_ACETIC[25.0] + math.log10(c / RHO_25))
    tol = 0.002 if c >= 0.01 else 0.005
    assert _ph_at(_acetic(c, "ideal"), c) == pytest.approx(expected, abs=tol)


def test_equivalence_ph_with_davies_is_lowered_by_log_gamma() -> None:
    # same derivation with activities: a(OH-) = γ √(Kb F) (γ(A-) = γ(OH-), z = 1), I = F
    c = 0.01
    f = c / RHO_25
    expected = 0.5 * (PKW[25.0] + PKA_ACETIC[25.0] + math.log10(f)) + _davies_log_gamma(f)
    assert _ph_at(_acetic(c, "davies"), c) == pytest.approx(expected, abs=0.002)


def test_equivalence_point_is_found_on_the_curve_at_the_stoichiometric_dose() -> None:
    # textbook stoichiometry: one NaOH per acetic acid; the curve's grid step is C/100
    c = 0.01
    doses = np.linspace(0.0, 2.0 * c, 201)
    curve = dose_curve(_acetic(c, "ideal"), NAOH, doses)
    assert len(curve.equivalence_dose_mol_l) == 1
    assert curve.equivalence_dose_mol_l[0] == pytest.approx(c, abs=doses[1])


def test_equivalence_point_ph_on_the_curve_is_basic() -> None:
    # a weak acid's equivalence point lies above 7 (Harris QCA), at the analytic value
    # within the curve's interpolation at the located dose (the curve is steep there)
    c = 0.01
    curve = dose_curve(_acetic(c, "ideal"), NAOH, np.linspace(0.0, 2.0 * c, 201))
    expected = 0.5 * (PKW[25.0] + PKA_ACETIC[25.0] + math.log10(c / RHO_25))
    assert curve.equivalence_ph[0] == pytest.approx(expected, abs=0.02)
    assert curve.equivalence_ph[0] > 7.5


def test_strong_acid_equivalence_point_is_neutral() -> None:
    # HCl with NaOH: equivalence at pH = pKw/2 = 6.998 (reference-data.md §2), at the dose
    curve = dose_curve(
        StreamSpec((Entry("Cl-", 1.0, "mmol/L"),), activity_model="ideal"),
        NAOH,
        np.linspace(0.0, 2e-3, 201),
    )
    assert curve.equivalence_dose_mol_l == pytest.approx((1e-3,), abs=1e-5)
    assert curve.equivalence_ph[0] == pytest.approx(PKW[25.0] / 2.0, abs=0.01)


def test_phosphoric_acid_shows_two_equivalence_points_with_caustic() -> None:
    # H3PO4 (pK 2.15, 7.20, 12.35): end points at 1 and 2 equivalents; the third is not
    # seen in water (Harris QCA, polyprotic titrations; from memory)
    c = 1e-3
    doses = np.linspace(0.0, 3.5 * c, 351)
    curve = dose_curve(
        StreamSpec((Entry("phosphate", c * 1e3, "mmol/L"),), activity_model="ideal"), NAOH, doses
    )
    assert curve.equivalence_dose_mol_l == pytest.approx((c, 2 * c), abs=2 * doses[1])


def test_soda_ash_titrated_with_hcl_has_its_two_carbonate_end_points() -> None:
    # CO3 2- → HCO3- → H2CO3*: end points at 1 and 2 equivalents of acid (Harris QCA)
    c = 5e-3
    doses = np.linspace(0.0, 3.0 * c, 301)
    spec = StreamSpec(
        (Entry("Na+", 2 * c * 1e3, "mmol/L"), Entry("carbonate", c * 1e3, "mmol/L")),
        activity_model="ideal",
    )
    curve = dose_curve(spec, load_reagents()["HCl"], doses)
    assert curve.equivalence_dose_mol_l == pytest.approx((c, 2 * c), abs=2 * doses[1])
