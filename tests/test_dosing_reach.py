"""What a reagent can reach: unreachable setpoints, wrong-direction reagents, zero doses.

Outside values, each named where used:
* pH of a bicarbonate solution → (pK1 + pK2)/2 ≈ 8.3 (Snoeyink & Jenkins 1980; Stumm &
  Morgan, Aquatic Chemistry) — reference-data.md §6 [MEMORY, M]; carbonate pK1 6.352,
  pK2 10.329 at 25 °C (Plummer & Busenberg 1982, reference-data.md §3.1 [READ, derived]).
* CO2 at 1 atm: KH(25 °C) = 10^−1.468 mol/(kg·atm) (Plummer & Busenberg 1982,
  reference-data.md §3.1).
* Saturated Ca(OH)2 at 25 °C: 0.0203 mol/kg, pH 12.45 (Bates, Bower & Smith 1956,
  J. Res. NBS 56, 305 — reference-data.md §6/§8 [READ]).
* The 0.001 pH acceptance band for "already at setpoint" is the project's rule (issue 4).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from models.advice import advise_dose, resolve_reagent
from models.dosing import SETPOINT_TOLERANCE_PH, dose_curve, plan_doses
from models.equilibrium import solve
from models.errors import InputError, UnreachableSetpoint
from models.reagents import load_reagents
from models.stream import Entry, StreamSpec

PK1, PK2 = 6.352, 10.329  # carbonate, 25 °C, Plummer & Busenberg (1982)
LOG_KH_CO2 = -1.468  # mol/(kg·atm), 25 °C, Plummer & Busenberg (1982)
PKW = 13.995  # IAPWS R11-07, 25 °C (reference-data.md §2)
BATES_SAT_LIME_PH = 12.45  # Bates, Bower & Smith (1956), 25 °C [READ]
BATES_SAT_LIME_MOL_KG = 0.0203  # same source


def _spec(*entries: tuple[str, float], model: str = "ideal") -> StreamSpec:
    return StreamSpec(tuple(Entry(n, v, "mmol/L") for n, v in entries), activity_model=model)


def _one(spec: StreamSpec, reagent: str, setpoint: float):
    return plan_doses([spec], load_reagents()[reagent], setpoint)[0]


BICARBONATE = _spec(("Na+", 2.0), ("carbonate", 2.0))


# --- a weak reagent cannot drive the pH past its own ------------------------------------


def test_sodium_bicarbonate_cannot_take_a_bicarbonate_water_to_ph_10() -> None:
    res = _one(BICARBONATE, "NaHCO3", 10.0)
    assert isinstance(res, UnreachableSetpoint)
    assert "beyond" in res.message


def test_sodium_bicarbonate_reach_ends_near_half_pk1_plus_pk2() -> None:
    # Snoeyink & Jenkins / Stumm & Morgan: bicarbonate solutions sit at ≈ (pK1 + pK2)/2;
    # at the 1 mol/L limit dose the ideal pH is that value within a few hundredths
    res = _one(BICARBONATE, "NaHCO3", 10.0)
    assert isinstance(res, UnreachableSetpoint)
    assert res.reachable_min_ph == pytest.approx(solve(BICARBONATE).ph, abs=1e-9)
    assert res.reachable_max_ph == pytest.approx((PK1 + PK2) / 2.0, abs=0.03)
    assert res.reachable_max_ph < 10.0


def test_sodium_bicarbonate_lowers_an_alkaline_stream_toward_its_own_ph() -> None:
    # 1 mM Na2CO3 (pH 10.56, reference-data.md §6): a bicarbonate dose pulls it down toward
    # ≈ 8.3 (textbook carbonate chemistry); the dose to pH 9.5 is found and met
    soda = _spec(("Na+", 2.0), ("carbonate", 1.0))
    plan = _one(soda, "NaHCO3", 9.5)
    assert not isinstance(plan, Exception), plan
    assert plan.dose_mol_l > 0
    assert plan.final_ph == pytest.approx(9.5, abs=SETPOINT_TOLERANCE_PH)


def test_reachable_range_is_stated_lowest_first_when_a_base_lowers_the_ph() -> None:
    # regression: the range of a bicarbonate dose on a carbonate stream was (10.56, 8.36)
    soda = _spec(("Na+", 2.0), ("carbonate", 1.0))
    ph0 = solve(soda).ph
    res = _one(soda, "NaHCO3", 10.8)
    assert isinstance(res, UnreachableSetpoint)
    assert res.reachable_min_ph < res.reachable_max_ph
    assert res.reachable_max_ph == pytest.approx(ph0, abs=1e-9)
    assert res.reachable_min_ph == pytest.approx((PK1 + PK2) / 2.0, abs=0.06)
    assert "lowers pH" in res.message
    plan = _one(soda, "NaHCO3", 9.5)
    assert plan.reachable_ph[0] < plan.reachable_ph[1]


# --- CO2 cannot acidify below its saturation pH ------------------------------------------


def _ideal_carbonate_ph(na_mol_kg: float, ct_mol_kg: float) -> float:
    """Ideal charge balance Na+ + H+ = HCO3- + 2 CO3 2- + OH- (textbook, Stumm & Morgan)."""
    k1, k2, kw = 10.0**-PK1, 10.0**-PK2, 10.0**-PKW

    def f(ph: float) -> float:
        h = 10.0**-ph
        den = h * h + k1 * h + k1 * k2
        return na_mol_kg + h - ct_mol_kg * (k1 * h + 2 * k1 * k2) / den - kw / h

    return brentq(f, 0.0, 14.0, xtol=1e-12)


def test_co2_cannot_acidify_below_its_1_atm_saturation_ph() -> None:
    stream = _spec(("Na+", 0.1), ("carbonate", 0.1))
    res = _one(stream, "CO2", 3.5)
    assert isinstance(res, UnreachableSetpoint)
    # the limit: the stream's carbonate plus CO2 dissolved to saturation at 1 atm (KH), ideal
    saturation = _ideal_carbonate_ph(0.1e-3, 0.1e-3 + 10.0**LOG_KH_CO2)
    assert res.reachable_min_ph == pytest.approx(saturation, abs=0.01)
    assert res.reachable_max_ph == pytest.approx(solve(stream).ph, abs=1e-9)


def test_co2_reaches_a_setpoint_just_above_its_saturation_ph() -> None:
    stream = _spec(("Na+", 0.1), ("carbonate", 0.1))
    saturation = _ideal_carbonate_ph(0.1e-3, 0.1e-3 + 10.0**LOG_KH_CO2)
    plan = _one(stream, "CO2", saturation + 0.1)
    assert not isinstance(plan, Exception), plan
    assert plan.dose_mol_l < 10.0**LOG_KH_CO2


# --- lime has a saturation ceiling ------------------------------------------------------


def test_lime_above_the_saturated_lime_ph_is_unreachable() -> None:
    stream = _spec(("Na+", 0.1), ("Cl-", 0.1), model="davies")
    res = _one(stream, "Ca(OH)2", 13.0)
    assert isinstance(res, UnreachableSetpoint)
    assert "beyond" in res.message


def test_lime_ceiling_is_the_saturated_lime_ph_of_bates_1956() -> None:
    # Bates, Bower & Smith (1956): saturated Ca(OH)2 at 25 °C is pH 12.45. Tolerance 0.1: the
    # ceiling uses the handbook solubility (6 % above Bates → +0.03 pH, reference-data.md §8),
    # and Davies without the CaOH+ ion pair reads ≈ 0.05 high at I ≈ 0.06.
    stream = _spec(("Na+", 0.1), ("Cl-", 0.1), model="davies")
    res = _one(stream, "Ca(OH)2", 13.0)
    assert isinstance(res, UnreachableSetpoint)
    assert res.reachable_max_ph == pytest.approx(BATES_SAT_LIME_PH, abs=0.1)


def test_lime_ceiling_dose_is_the_saturation_solubility() -> None:
    # the limit dose named in the message is within 7 % of Bates's 0.0203 mol/kg
    # (reference-data.md §8: handbook and pH-standard solubilities differ by 6 %)
    stream = _spec(("Na+", 0.1), ("Cl-", 0.1), model="davies")
    res = _one(stream, "Ca(OH)2", 13.0)
    limit_mmol_l = float(res.message.split("limit dose of ")[1].split(" mmol/L")[0])
    assert limit_mmol_l == pytest.approx(BATES_SAT_LIME_MOL_KG * 1e3 * 0.99705, rel=0.07)


def test_lime_below_its_ceiling_is_dosed() -> None:
    stream = _spec(("Na+", 0.1), ("Cl-", 0.1), model="davies")
    plan = _one(stream, "Ca(OH)2", 12.3)
    assert not isinstance(plan, Exception), plan
    assert plan.final_ph == pytest.approx(12.3, abs=SETPOINT_TOLERANCE_PH)


def test_lime_ceiling_is_lower_in_warm_water() -> None:
    # retrograde solubility of Ca(OH)2 (Seidell / Lange, reference-data.md §8)
    cold = StreamSpec((Entry("Cl-", 0.1, "mmol/L"), Entry("Na+", 0.1, "mmol/L")), 10.0, "davies")
    warm = StreamSpec((Entry("Cl-", 0.1, "mmol/L"), Entry("Na+", 0.1, "mmol/L")), 60.0, "davies")
    lime = load_reagents()["Ca(OH)2"]
    cold_res, warm_res = plan_doses([cold, warm], lime, 14.0)
    def limit(e: UnreachableSetpoint) -> float:
        return float(e.message.split("limit dose of ")[1].split(" mmol/L")[0])
    assert limit(warm_res) < limit(cold_res)


# --- the wrong direction ---------------------------------------------------------------


def test_an_acid_asked_to_raise_the_ph_is_unreachable_with_its_range() -> None:
    stream = _spec(("Na+", 2.0), ("carbonate", 2.0))
    ph0 = solve(stream).ph
    res = _one(stream, "HCl", ph0 + 1.0)
    assert isinstance(res, UnreachableSetpoint)
    assert "lowers pH" in res.message
    assert res.reachable_max_ph == pytest.approx(ph0, abs=1e-9)
    assert res.reachable_min_ph < 1.0  # 1 mol/L HCl: pH ≈ 0 (textbook)


def test_a_wrong_direction_message_shows_the_two_ph_values_apart() -> None:
    # Dilute NaCl at 25 °C: pH = pKw/2 = 6.9975 (IAPWS R11-07 pKw 13.995), which rounds
    # to 7.00 like the setpoint; the message must still tell the two apart.
    stream = _spec(("Na+", 0.01), ("Cl-", 0.01))
    own = f"{solve(stream).ph:.3f}"
    assert own.startswith("6.99")
    res = _one(stream, "HCl", 7.0)
    assert isinstance(res, UnreachableSetpoint)
    assert f"from pH {own} to 7.000" in res.message
    assert f"own pH {own}" in res.message


def test_an_unreachable_message_never_prints_minus_zero() -> None:
    # 1 mol/L HCl limit dose reaches pH ≈ 0 (textbook); it must not read "-0.00".
    res = _one(_spec(("Na+", 0.01), ("Cl-", 0.01)), "HCl", 7.5)
    assert isinstance(res, UnreachableSetpoint)
    assert "-0.00" not in res.message


def test_a_base_asked_to_lower_the_ph_is_unreachable_with_its_range() -> None:
    stream = _spec(("Na+", 2.0), ("carbonate", 2.0))
    ph0 = solve(stream).ph
    res = _one(stream, "NaOH", ph0 - 1.0)
    assert isinstance(res, UnreachableSetpoint)
    assert "raises pH" in res.message
    assert res.reachable_min_ph == pytest.approx(ph0, abs=1e-9)
    assert res.reachable_max_ph > 13.0  # 1 mol/L NaOH: pH ≈ 14 (textbook)


def test_an_unreachable_setpoint_is_one_stream_of_a_batch_only() -> None:
    streams = [BICARBONATE, _spec(("Cl-", 1.0))]
    out = plan_doses(streams, load_reagents()["NaOH"], [7.0, 7.0])
    assert isinstance(out[0], UnreachableSetpoint)
    assert not isinstance(out[1], Exception)
    assert out[1].final_ph == pytest.approx(7.0, abs=SETPOINT_TOLERANCE_PH)


# --- a setpoint already met -----------------------------------------------------------


@pytest.mark.parametrize("offset", [0.0, 0.0009, -0.0009])
def test_a_stream_within_0_001_of_the_setpoint_gets_a_zero_dose(offset: float) -> None:
    ph0 = solve(BICARBONATE).ph
    plan = _one(BICARBONATE, "NaOH", ph0 + offset)
    assert not isinstance(plan, Exception), plan
    assert plan.dose_mol_l == 0.0
    assert plan.already_met
    assert plan.final_ph == pytest.approx(ph0, abs=1e-12)


def test_a_stream_just_outside_the_band_gets_a_dose() -> None:
    ph0 = solve(BICARBONATE).ph
    plan = _one(BICARBONATE, "NaOH", ph0 + 0.002)
    assert not isinstance(plan, Exception), plan
    assert plan.dose_mol_l > 0.0
    assert not plan.already_met


def test_a_met_setpoint_needs_no_reagent_of_either_direction() -> None:
    # an acid at a setpoint 0.0005 above the stream's pH: zero dose, not "wrong direction"
    ph0 = solve(BICARBONATE).ph
    plan = _one(BICARBONATE, "HCl", ph0 + 0.0005)
    assert not isinstance(plan, Exception), plan
    assert plan.dose_mol_l == 0.0


def test_advice_for_a_met_setpoint_says_no_reagent_is_needed() -> None:
    ph0 = solve(BICARBONATE).ph
    adv = advise_dose(BICARBONATE, resolve_reagent("NaOH"), ph0, flow_m3_h=10.0)
    assert adv.dose_mmol_l == 0.0
    assert adv.amounts["product_l_h"] == 0.0
    assert any("no NaOH is needed" in w for w in adv.warnings)
    assert math.isfinite(adv.final_ph)


# --- the reagent's solubility table and the batch ---------------------------------------


def test_a_temperature_outside_the_reagents_solubility_table_fails_that_stream_only() -> None:
    # regression: the InputError of one stream's temperature escaped plan_doses and took the
    # whole batch down; Mg(OH)2 solubility is tabulated at 25 °C only (reagents.toml)
    acid = _spec(("Cl-", 0.1))
    warm = StreamSpec(acid.composition, temperature_c=30.0, activity_model="ideal")
    at_25, at_30 = plan_doses([acid, warm], load_reagents()["Mg(OH)2"], 4.5)
    assert not isinstance(at_25, Exception), at_25
    assert at_25.final_ph == pytest.approx(4.5, abs=SETPOINT_TOLERANCE_PH)
    assert isinstance(at_30, InputError)
    assert at_30.field == "/temperature_c"


def test_dose_advice_names_the_stream_temperature_outside_the_solubility_table() -> None:
    warm = StreamSpec((Entry("Cl-", 0.1, "mmol/L"),), temperature_c=30.0)
    with pytest.raises(InputError) as err:
        advise_dose(warm, resolve_reagent("Mg(OH)2"), 4.5)
    assert err.value.field == "/stream/temperature_c"


def test_lime_neutralises_a_strong_acid_beyond_its_pure_water_solubility() -> None:
    # textbook stoichiometry: Ca(OH)2 + 2 HCl → CaCl2 + 2 H2O; 0.1 M HCl to pH 7 takes
    # ≈ 50 mmol/L of lime, all of it dissolved as CaCl2
    acid = StreamSpec((Entry("Cl-", 100.0, "mmol/L"),), activity_model="davies")
    plan = _one(acid, "Ca(OH)2", 7.0)
    assert not isinstance(plan, Exception), plan
    assert plan.dose_mol_l == pytest.approx(0.05, rel=1e-3)


def test_the_reach_limit_is_a_dose_the_model_can_solve() -> None:
    # regression (found by tests/test_dosing_properties): 1 mol/L soda ash is I ≈ 3 mol/kg,
    # past every activity model, and its failed solve (pH 11.76) was stated as the reach —
    # while pH 11.35 inside that "range" was refused. The limit now backs off to a dose the
    # model solves, and the stated range holds at that dose.
    spec = StreamSpec(
        (Entry("phosphate", 1.5, "mmol/L"), Entry("Na+", 5.9, "mmol/L")), 70.0, "davies"
    )
    res = _one(spec, "Na2CO3", 11.35)
    assert isinstance(res, UnreachableSetpoint)
    assert not res.reachable_min_ph < 11.35 < res.reachable_max_ph
    limit_mmol_l = float(res.message.split("limit dose of ")[1].split(" mmol/L")[0])
    assert limit_mmol_l < 1000.0
    at_limit = dose_curve(spec, load_reagents()["Na2CO3"], np.array([limit_mmol_l * 1e-3]))
    assert at_limit.ph[0] == pytest.approx(res.reachable_max_ph, abs=0.01)
