"""Dose plans against the reference dose values and against the titration curve.

* 2.0 mM NaHCO3, ideal, 25 °C, closed: pH 8.318 (start), → pH 10.0 with 0.739 mmol/L NaOH,
  → pH 6.0 with 1.385 mmol/L HCl — reference-data.md §6, DERIVED there from the file's
  constants (pK1 6.352, pK2 10.329, pKw 13.995): an internal-consistency check of the
  dose solve against an independent derivation, not a measurement.
* Buffer capacity at pH = pKa, β = 2.303 (C/4 + [H+] + [OH-]) (Van Slyke 1922, reference-data.md
  §6 [MEMORY, H]): 0.010 M acetate at pH 4.756 gives 5.80e-3 mol/(L·pH) [DERIVED there].
* β = dC_base/dpH (Van Slyke's definition), so the curve's β must match the inverse slope
  of its own pH against the dose.
"""

from __future__ import annotations

import numpy as np
import pytest

from models.dosing import SETPOINT_TOLERANCE_PH, dose_curve, plan_doses
from models.equilibrium import solve
from models.reagents import load_reagents
from models.stream import Entry, StreamSpec

R = load_reagents()
BICARBONATE = StreamSpec(
    (Entry("Na+", 2.0, "mmol/L"), Entry("carbonate", 2.0, "mmol/L")), activity_model="ideal"
)
# reference-data.md §6 quotes 3 decimals in mmol/L: half a unit of the last digit
REF_TOL_MMOL = 6e-4


def _plan(spec: StreamSpec, reagent: str, setpoint: float):
    plan = plan_doses([spec], R[reagent], setpoint)[0]
    assert not isinstance(plan, Exception), plan
    return plan


def test_bicarbonate_water_starts_at_the_derived_ph() -> None:
    # reference-data.md §6 [DERIVED]: start pH 8.318 (ideal)
    assert solve(BICARBONATE).ph == pytest.approx(8.318, abs=6e-4)


def test_bicarbonate_water_to_ph_10_takes_0_739_mmol_l_naoh() -> None:
    # reference-data.md §6 [DERIVED, internal consistency]
    assert _plan(BICARBONATE, "NaOH", 10.0).dose_mol_l * 1e3 == pytest.approx(0.739, abs=REF_TOL_MMOL)


def test_bicarbonate_water_to_ph_6_takes_1_385_mmol_l_hcl() -> None:
    # reference-data.md §6 [DERIVED, internal consistency]
    assert _plan(BICARBONATE, "HCl", 6.0).dose_mol_l * 1e3 == pytest.approx(1.385, abs=REF_TOL_MMOL)


@pytest.mark.parametrize(
    ("reagent", "setpoint", "top_mmol"),
    [("NaOH", 10.0, 1.5), ("HCl", 6.0, 3.0), ("H2SO4", 6.0, 1.5), ("Ca(OH)2", 9.5, 1.0)],
)
def test_the_dose_lies_on_the_titration_curve_of_the_same_stream_and_reagent(
    reagent: str, setpoint: float, top_mmol: float
) -> None:
    plan = _plan(BICARBONATE, reagent, setpoint)
    doses = np.linspace(0.0, top_mmol * 1e-3, 601)
    curve = dose_curve(BICARBONATE, R[reagent], doses)
    ph_at_dose = np.interp(plan.dose_mol_l, curve.dose_mol_l, curve.ph)
    assert ph_at_dose == pytest.approx(setpoint, abs=1e-3)


def test_the_dose_lies_on_the_curve_with_activities_and_temperature() -> None:
    spec = StreamSpec(
        (
            Entry("Na+", 5.0, "mmol/L"),
            Entry("Ca2+", 1.0, "mmol/L"),
            Entry("Cl-", 3.0, "mmol/L"),
            Entry("carbonate", 4.0, "mmol/L"),
            Entry("ammonia", 1.0, "mmol/L"),
        ),
        temperature_c=38.0,
        activity_model="davies",
    )
    plan = _plan(spec, "KOH", 9.8)
    curve = dose_curve(spec, R["KOH"], np.linspace(0.0, 2 * plan.dose_mol_l, 801))
    assert np.interp(plan.dose_mol_l, curve.dose_mol_l, curve.ph) == pytest.approx(9.8, abs=1e-3)


def test_the_final_state_of_a_plan_solves_to_the_setpoint() -> None:
    # the dosed stream handed back as an analysis is the stream the plan promised
    plan = _plan(BICARBONATE, "HCl", 6.0)
    assert solve(plan.final_spec).ph == pytest.approx(6.0, abs=SETPOINT_TOLERANCE_PH)


def test_curve_at_zero_dose_is_the_stream_itself() -> None:
    curve = dose_curve(BICARBONATE, R["NaOH"], np.array([0.0, 1e-4]))
    assert curve.ph[0] == pytest.approx(solve(BICARBONATE).ph, abs=1e-9)


def test_curve_beta_at_the_pka_is_van_slykes_c_over_4() -> None:
    # Van Slyke: β(pH = pKa) = 2.303 (C/4 + [H+] + [OH-]); 0.010 M acetate: 5.80e-3
    spec = StreamSpec((Entry("acetate", 10.0, "mmol/L"),), activity_model="ideal")
    plan = _plan(spec, "NaOH", 4.756)
    curve = dose_curve(spec, R["NaOH"], np.array([plan.dose_mol_l]))
    assert curve.beta_mol_l[0] == pytest.approx(5.80e-3, rel=0.01)


def test_curve_beta_is_the_inverse_slope_of_the_curve() -> None:
    # β = dC_b/dpH (Van Slyke's definition): compare with the curve's own central differences
    doses = np.linspace(0.0, 1.5e-3, 1501)
    curve = dose_curve(BICARBONATE, R["NaOH"], doses)
    inv_slope = np.gradient(doses, curve.ph)
    mid = slice(10, -10)
    np.testing.assert_allclose(curve.beta_mol_l[mid], inv_slope[mid], rtol=0.01)
