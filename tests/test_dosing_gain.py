"""Process gain dpH/d(dose) at the setpoint and the high-gain warning.

* The gain is a derivative: it must agree with a central finite difference of forward
  solves (dose_curve) around the dose (calculus, no source needed).
* Unbuffered water near pH 7: dpH/dC_b = 1/β with β = 2.303([H+] + [OH-]) (Van Slyke
  1922, reference-data.md §6 [MEMORY, H]) — about 2.2e6 pH per mol/L at pH 7.
* The warning threshold — a ±1 % error in reagent flow moving the pH by more than 0.1 —
  is a rule of thumb of the trade (common practice, no source), stated in models.dosing.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from models.advice import advise_dose, resolve_reagent
from models.dosing import HIGH_GAIN_RULE, dose_curve, plan_doses
from models.reagents import load_reagents
from models.stream import Entry, StreamSpec

R = load_reagents()
PKW_25 = 13.995  # IAPWS R11-07, reference-data.md §2
RHO_25 = 0.997048


def _plan(spec: StreamSpec, reagent: str, setpoint: float):
    plan = plan_doses([spec], R[reagent], setpoint)[0]
    assert not isinstance(plan, Exception), plan
    return plan


def _finite_difference_gain(spec: StreamSpec, reagent: str, dose: float, rel_step: float) -> float:
    h = dose * rel_step
    curve = dose_curve(spec, R[reagent], np.array([dose - h, dose + h]))
    return float((curve.ph[1] - curve.ph[0]) / (2.0 * h))


CASES = [
    pytest.param(
        StreamSpec((Entry("phosphate", 10.0, "mmol/L"),), activity_model="davies"),
        "NaOH", 7.2, 1e-4, id="phosphate-buffer-naoh",
    ),
    pytest.param(
        StreamSpec(
            (Entry("Na+", 2.0, "mmol/L"), Entry("carbonate", 2.0, "mmol/L")), 40.0, "davies"
        ),
        "H2SO4", 6.5, 1e-4, id="bicarbonate-h2so4-40C",
    ),
    pytest.param(
        StreamSpec((Entry("Cl-", 1.0, "mmol/L"),), activity_model="ideal"),
        "NaOH", 7.0, 1e-6, id="unbuffered-hcl-naoh",
    ),
    pytest.param(
        StreamSpec((Entry("ammonia", 3.0, "mmol/L"), Entry("Cl-", 3.0, "mmol/L")), 15.0,
                   "extended_debye_huckel"),
        "Ca(OH)2", 9.5, 1e-4, id="ammonium-lime-15C",
    ),
]


@pytest.mark.parametrize(("spec", "reagent", "setpoint", "step"), CASES)
def test_gain_agrees_with_a_finite_difference_of_forward_solves(spec, reagent, setpoint, step) -> None:
    plan = _plan(spec, reagent, setpoint)
    fd = _finite_difference_gain(spec, reagent, plan.dose_mol_l, step)
    assert plan.gain_ph_per_mol_l == pytest.approx(fd, rel=1e-3)


def test_gain_of_an_acid_is_negative() -> None:
    spec = StreamSpec((Entry("Na+", 2.0, "mmol/L"), Entry("carbonate", 2.0, "mmol/L")))
    assert _plan(spec, "HCl", 7.0).gain_ph_per_mol_l < 0


def test_gain_in_unbuffered_water_at_ph_7_is_one_over_the_water_buffer_capacity() -> None:
    # Van Slyke: β = 2.303 ([H+] + [OH-]) for water alone (molal → mol/L by ρ)
    plan = _plan(StreamSpec((Entry("Cl-", 1.0, "mmol/L"),), activity_model="ideal"), "NaOH", 7.0)
    beta = math.log(10.0) * (1e-7 + 10.0 ** (7.0 - PKW_25)) * RHO_25
    assert plan.gain_ph_per_mol_l == pytest.approx(1.0 / beta, rel=1e-3)


def test_high_gain_warning_for_an_unbuffered_stream_near_ph_7() -> None:
    plan = _plan(StreamSpec((Entry("Cl-", 1.0, "mmol/L"), Entry("Na+", 0.2, "mmol/L")),
                            activity_model="davies"), "NaOH", 7.0)
    assert any("process gain is high" in w for w in plan.warnings)


def test_no_high_gain_warning_for_a_well_buffered_stream() -> None:
    # 10 mM phosphate at pH 7.2 (its pK2): a 1 % flow error moves the pH by < 0.01
    plan = _plan(StreamSpec((Entry("phosphate", 10.0, "mmol/L"),), activity_model="davies"),
                 "NaOH", 7.2)
    assert not any("process gain" in w for w in plan.warnings)


def test_high_gain_warning_states_the_ph_move_a_1_percent_flow_error_really_gives() -> None:
    # regression: the warning extrapolated the gain linearly and claimed a 1 % error moves
    # the pH by 21.6 units; 1 % of 1 mM NaOH in excess is 1e-5 M OH- (pH 9), i.e. 2 units
    spec = StreamSpec((Entry("Cl-", 1.0, "mmol/L"),), activity_model="ideal")
    plan = _plan(spec, "NaOH", 7.0)
    (warning,) = [w for w in plan.warnings if "process gain is high" in w]
    stated = float(re.search(r"moves the pH by ([0-9.]+)", warning).group(1))
    curve = dose_curve(spec, R["NaOH"], plan.dose_mol_l * np.array([0.99, 1.01]))
    true_move = float(np.max(np.abs(curve.ph - 7.0)))
    assert stated == pytest.approx(true_move, abs=0.01)
    # textbook: 1e-5 M excess strong base → pOH 5 → pH ≈ pKw − 5
    assert stated == pytest.approx(PKW_25 - 5.0 - 7.0, abs=0.02)


def test_high_gain_warning_follows_the_stated_rule_of_thumb() -> None:
    # the warning appears exactly when the forward-solved ±1 % move exceeds the threshold;
    # 1 mM HCl taken to pH 4 … 10: far from neutral the free H+/OH- buffers (no warning),
    # near neutral it does not (warning) — both outcomes occur
    frac, limit = HIGH_GAIN_RULE
    spec = StreamSpec((Entry("Cl-", 1.0, "mmol/L"),), activity_model="ideal")
    setpoints = [3.5, 4.0, 5.0, 6.0, 7.0, 9.0, 10.0, 10.5]
    plans = plan_doses([spec] * len(setpoints), R["NaOH"], setpoints)
    outcomes = set()
    for plan in plans:
        assert not isinstance(plan, Exception), plan
        curve = dose_curve(spec, R["NaOH"], plan.dose_mol_l * np.array([1 - frac, 1 + frac]))
        move = float(np.max(np.abs(curve.ph - plan.final_ph)))
        warned = any("process gain is high" in w for w in plan.warnings)
        assert warned == (move > limit), (plan.final_ph, move)
        outcomes.add(warned)
    assert outcomes == {True, False}


def test_advice_gain_per_mmol_l_is_the_plan_gain_in_mmol() -> None:
    spec = StreamSpec((Entry("Na+", 2.0, "mmol/L"), Entry("carbonate", 2.0, "mmol/L")))
    plan = _plan(spec, "NaOH", 9.0)
    adv = advise_dose(spec, resolve_reagent("NaOH"), 9.0, flow_m3_h=5.0)
    assert adv.process_gain_ph_per_mmol_l == pytest.approx(plan.gain_ph_per_mol_l / 1e3, rel=1e-12)


def test_advice_gain_per_l_h_of_50_percent_caustic_follows_its_molarity() -> None:
    # 1 L/h of 50 % NaOH (19.07 mol/L, CRC 20 °C, reference-data.md §8 [MEMORY, H; molarity
    # DERIVED]) into Q m³/h of stream adds 19.07 / (1000 Q) mol/L of dose
    spec = StreamSpec((Entry("Na+", 2.0, "mmol/L"), Entry("carbonate", 2.0, "mmol/L")))
    q = 12.0
    adv = advise_dose(spec, resolve_reagent("NaOH", strength_pct_w=50.0), 9.0, flow_m3_h=q)
    mmol_l_per_l_h = 19.07e3 / (1000.0 * q)
    assert adv.process_gain_ph_per_l_h == pytest.approx(
        adv.process_gain_ph_per_mmol_l * mmol_l_per_l_h, rel=1e-3
    )


def test_advice_has_no_gain_per_l_h_without_a_flow() -> None:
    spec = StreamSpec((Entry("Na+", 2.0, "mmol/L"), Entry("carbonate", 2.0, "mmol/L")))
    adv = advise_dose(spec, resolve_reagent("NaOH"), 9.0)
    assert adv.process_gain_ph_per_l_h is None
    assert adv.process_gain_ph_per_mmol_l > 0
