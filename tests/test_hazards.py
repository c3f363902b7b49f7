"""Hazard flags computed from the chemistry of the final state, and the safety note.

Outside values (ideal activity model, 25 °C unless said), each named where used:
* H2S pK1 = 6.978 (Suleimenov & Seward 1997, reference-data.md §4 [MEMORY, M]); pK2 ≥ 17,
  so S2- is negligible (same table).
* HCN pKa = 9.21 (Harris, Quantitative Chemical Analysis, App. G; from memory).
* NH4+ pKa = 9.244 (Bates & Pinching 1949; Harris App. G 9.245 [READ], reference-data.md §4).
* HOCl pKa = 7.537 (Morris 1966, reference-data.md §4 [MEMORY, H]).
* Henry constants KH [mol/(L·atm)] at 25 °C, Sander (2015) compilation [READ, henrys-law.org]:
  H2S 0.1013, HCN 9.02 (Ma et al. 2010), NH3 59.8. Equilibrium partial pressure over the
  liquid p = c(neutral)/KH (Henry's law, textbook) — reported in ppm(v) at 1 atm.
* Calcite: SI = log(a(Ca2+)·a(CO3 2-)) + pKsp, pKsp = 8.480, carbonate pK1 6.352, pK2 10.329
  (Plummer & Busenberg 1982, reference-data.md §3.1 [READ, derived]).
* Thresholds (the flag levels themselves) are the data file's: NIOSH/ACGIH limits [MEMORY],
  "common practice" otherwise.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from models.advice import SAFETY_NOTE, advise_blend, advise_curve, advise_dose, resolve_reagent
from models.hazards import Hazard, assess, concentrated_reagent, hazard_data
from models.equilibrium import solve
from models.stream import Entry, StreamSpec
from models.thermo import load_database

PK_H2S = 6.978
PK_HCN = 9.21
PK_NH4 = 9.244
KH = {"H2S": 0.1013, "HCN": 9.02, "NH3": 59.8}
PKSP_CALCITE, PK1_CO2, PK2_CO2 = 8.480, 6.352, 10.329
RHO_25 = 0.997048

DB = load_database()


def _spec(*entries: tuple[str, float]) -> StreamSpec:
    return StreamSpec(tuple(Entry(n, v, "mmol/L") for n, v in entries), activity_model="ideal")


def _flag(hazards: list[Hazard], code: str) -> Hazard:
    found = [h for h in hazards if h.code == code]
    assert len(found) == 1, [h.code for h in hazards]
    return found[0]


def _neutral_fraction_acid(ph: float, pka: float) -> float:
    """Fraction of a monoprotic system in its protonated form (textbook)."""
    return 1.0 / (1.0 + 10.0 ** (ph - pka))


SULFIDE = _spec(("sulfide", 1.0), ("Na+", 1.0))  # 1 mM NaHS


# --- sulfide ------------------------------------------------------------------------------


def test_acidifying_a_sulfide_stream_flags_h2s_release() -> None:
    adv = advise_dose(SULFIDE, resolve_reagent("HCl"), 6.0)
    flag = _flag(adv.hazards, "h2s_release")
    assert flag.severity == "danger"  # ≈ 9000 ppm ≫ 100 ppm IDLH (data file)


def test_h2s_fraction_after_acidifying_is_the_monoprotic_fraction_at_pk1() -> None:
    adv = advise_dose(SULFIDE, resolve_reagent("HCl"), 6.0)
    sulfide = next(s for s in adv.final.systems if s.name == "sulfide")
    assert sulfide.fractions["H2S"] == pytest.approx(_neutral_fraction_acid(6.0, PK_H2S), abs=1e-3)
    flag = _flag(adv.hazards, "h2s_release")
    assert f"{sulfide.fractions['H2S']:.1%}" in flag.message


def test_h2s_partial_pressure_is_dissolved_h2s_over_the_henry_constant() -> None:
    adv = advise_dose(SULFIDE, resolve_reagent("HCl"), 6.0)
    c_h2s = 1.0e-3 * _neutral_fraction_acid(6.0, PK_H2S)
    expected_ppm = c_h2s / KH["H2S"] * 1e6
    assert _flag(adv.hazards, "h2s_release").value == pytest.approx(expected_ppm, rel=5e-3)


def test_henry_constant_of_h2s_in_the_data_is_sanders() -> None:
    # Sander (2015): Hscp 1.0e-3 mol/(m³ Pa) × 101.325 = 0.1013 mol/(L atm)
    assert float(DB.henry["H2S"].kh(25.0)) == pytest.approx(KH["H2S"], rel=1e-3)


def test_alkaline_sulfide_stream_carries_little_h2s() -> None:
    # 1 mM Na2S (pH ≈ 11): 0.01 % is H2S, ≈ 0.9 ppm over the liquid — below the 1 ppm TLV
    # (data file) and four orders of magnitude below the acidified case
    hz = assess(solve(_spec(("sulfide", 1.0), ("Na+", 2.0))), DB)
    flag = _flag(hz, "h2s_release")
    ph = solve(_spec(("sulfide", 1.0), ("Na+", 2.0))).ph
    assert flag.value == pytest.approx(1e-3 * _neutral_fraction_acid(ph, PK_H2S) / KH["H2S"] * 1e6, rel=5e-3)
    assert flag.value < 100.0
    assert flag.severity == "info"


# --- cyanide ------------------------------------------------------------------------------


def test_cyanide_below_ph_9_flags_hcn() -> None:
    # 0.1 mM NaCN acidified to pH 8.5: 84 % HCN, ≈ 9 ppm > 4.7 ppm NIOSH ceiling (data file)
    adv = advise_dose(_spec(("cyanide", 0.1), ("Na+", 0.1)), resolve_reagent("HCl"), 8.5)
    flag = _flag(adv.hazards, "hcn_release")
    assert flag.severity in ("warning", "danger")
    expected = 0.1e-3 * _neutral_fraction_acid(8.5, PK_HCN) / KH["HCN"] * 1e6
    assert flag.value == pytest.approx(expected, rel=5e-3)


def test_cyanide_kept_alkaline_is_only_an_info_flag() -> None:
    # common practice: cyanide streams are held above pH 10.5; 0.01 mM at pH ≈ 11.7
    res = solve(_spec(("cyanide", 0.01), ("Na+", 5.0)))
    assert res.ph > 10.5
    assert _flag(assess(res, DB), "hcn_release").severity == "info"


# --- ammonia ------------------------------------------------------------------------------


def test_ammonia_at_ph_11_flags_free_nh3() -> None:
    adv = advise_dose(_spec(("ammonia", 1.0), ("Cl-", 1.0)), resolve_reagent("NaOH"), 11.0)
    flag = _flag(adv.hazards, "nh3_release")
    assert flag.severity == "warning"
    free = 1.0 - _neutral_fraction_acid(11.0, PK_NH4)  # NH3 is the deprotonated form
    ammonia = next(s for s in adv.final.systems if s.name == "ammonia")
    assert ammonia.fractions["NH3"] == pytest.approx(free, abs=1e-3)


def test_a_fraction_triggered_flag_reports_the_fraction_against_its_threshold() -> None:
    # regression: at pH 11, 1 mM ammonia gives 16 ppm NH3 (below the 25 ppm REL); the flag
    # fires on the free fraction (0.98 > 0.5) and must state that fraction, not ppm against 0.5
    adv = advise_dose(_spec(("ammonia", 1.0), ("Cl-", 1.0)), resolve_reagent("NaOH"), 11.0)
    flag = _flag(adv.hazards, "nh3_release")
    cfg = hazard_data()["gas"]["NH3"]
    assert flag.threshold == cfg["fraction_warning"]
    assert flag.unit == "fraction"
    assert flag.value == pytest.approx(1.0 - _neutral_fraction_acid(11.0, PK_NH4), abs=1e-3)
    assert flag.value >= flag.threshold
    ppm = 1.0e-3 * flag.value / KH["NH3"] * 1e6
    assert f"{ppm:.3g} ppm" in flag.message


def test_every_gas_flag_value_is_in_the_unit_of_its_threshold() -> None:
    # a flag compares value with threshold in one unit: warning/danger by ppm reach the ppm
    # threshold, a fraction flag reaches the fraction threshold, an info flag stays below
    streams = [
        (SULFIDE, "HCl", 6.0), (_spec(("cyanide", 0.1), ("Na+", 0.1)), "HCl", 8.5),
        (_spec(("ammonia", 1.0), ("Cl-", 1.0)), "NaOH", 11.0),
        (_spec(("ammonia", 1.0), ("Cl-", 1.0)), "HCl", 5.0),
    ]
    for spec, reagent, sp in streams:
        for h in advise_dose(spec, resolve_reagent(reagent), sp).hazards:
            if not h.code.endswith("_release"):
                continue
            if h.severity == "info":
                assert h.value < h.threshold, h
            else:
                assert h.value >= h.threshold, h


# --- hypochlorite -------------------------------------------------------------------------


HYPO_WITH_CHLORIDE = _spec(("hypochlorite", 1.0), ("Na+", 2.0), ("Cl-", 1.0))


def test_hypochlorite_with_chloride_acidified_below_ph_4_flags_chlorine_gas_danger() -> None:
    adv = advise_dose(HYPO_WITH_CHLORIDE, resolve_reagent("HCl"), 3.5)
    flag = _flag(adv.hazards, "chlorine_gas")
    assert flag.severity == "danger"
    assert "chlorine gas" in flag.message


def test_hypochlorite_at_ph_8_reports_the_hocl_split_without_alarm() -> None:
    # Morris (1966) pKa 7.537: at pH 8.0 HOCl is 1/(1 + 10^0.463) = 25.6 %
    res = solve(HYPO_WITH_CHLORIDE)
    adv = advise_dose(HYPO_WITH_CHLORIDE, resolve_reagent("HCl"), 8.0)
    flag = _flag(adv.hazards, "chlorine_gas")
    assert res.ph > 8.0
    assert flag.severity == "info"
    assert f"{_neutral_fraction_acid(8.0, 7.537):.1%} HOCl" in flag.message


def test_hypochlorite_without_chloride_below_ph_4_is_a_warning_not_danger() -> None:
    adv = advise_dose(_spec(("hypochlorite", 1.0), ("Na+", 1.0)), resolve_reagent("H2SO4"), 3.5)
    assert _flag(adv.hazards, "chlorine_gas").severity == "warning"


# --- concentrated reagents ----------------------------------------------------------------


def test_98_percent_sulfuric_acid_carries_heat_of_dilution() -> None:
    spec = _spec(("Na+", 2.0), ("carbonate", 2.0))
    adv = advise_dose(spec, resolve_reagent("H2SO4", strength_pct_w=98.0), 6.5)
    flag = _flag(adv.hazards, "heat_of_dilution")
    assert "never water to" in flag.message
    assert flag.value == 98.0


def test_50_percent_caustic_carries_heat_of_dilution() -> None:
    spec = _spec(("Na+", 2.0), ("carbonate", 2.0))
    adv = advise_dose(spec, resolve_reagent("NaOH", strength_pct_w=50.0), 9.0)
    _flag(adv.hazards, "heat_of_dilution")


def test_dilute_caustic_and_gases_carry_no_heat_of_dilution_flag() -> None:
    # below 10 % w/w (common practice threshold of the data file), and a gas has none
    assert concentrated_reagent("base", "solution", 5.0, "NaOH") == []
    assert concentrated_reagent("acid", "gas", 100.0, "CO2") == []
    assert concentrated_reagent("acid", "solution", 10.0, "HCl") != []


# --- calcite scaling ----------------------------------------------------------------------


HARD = _spec(("Ca2+", 1.0), ("carbonate", 2.0))  # Ca(HCO3)2 water, pH ≈ 8.3


def _ideal_si(ca_mol_l: float, ct_mol_l: float, ph: float) -> float:
    h = 10.0**-ph
    k1, k2 = 10.0**-PK1_CO2, 10.0**-PK2_CO2
    alpha2 = k1 * k2 / (h * h + k1 * h + k1 * k2)
    return math.log10(ca_mol_l / RHO_25 * ct_mol_l / RHO_25 * alpha2) + PKSP_CALCITE


def test_lime_to_high_ph_on_a_calcium_carbonate_water_flags_calcite_scaling() -> None:
    adv = advise_dose(HARD, resolve_reagent("Ca(OH)2"), 10.0)
    flag = _flag(adv.hazards, "calcite_scaling")
    expected = _ideal_si((1.0 + adv.dose_mmol_l) * 1e-3, 2.0e-3, 10.0)
    assert flag.value == pytest.approx(expected, abs=0.01)
    assert flag.value > 0


def test_acidified_calcium_carbonate_water_has_no_scaling_flag() -> None:
    adv = advise_dose(HARD, resolve_reagent("H2SO4"), 6.0)
    assert adv.final.calcite_saturation_index < 0
    assert _ideal_si(1.0e-3, 2.0e-3, 6.0) < 0
    assert not [h for h in adv.hazards if h.code == "calcite_scaling"]


def test_soda_ash_on_a_calcium_water_flags_calcite_scaling() -> None:
    spec = _spec(("Ca2+", 2.0), ("Cl-", 4.0))
    adv = advise_dose(spec, resolve_reagent("Na2CO3"), 9.5)
    flag = _flag(adv.hazards, "calcite_scaling")
    assert flag.value == pytest.approx(_ideal_si(2.0e-3, adv.dose_mmol_l * 1e-3, 9.5), abs=0.01)


# --- safety note --------------------------------------------------------------------------


def test_every_dose_advice_has_the_safety_note() -> None:
    adv = advise_dose(HARD, resolve_reagent("NaOH"), 9.0)
    assert adv.safety_note == SAFETY_NOTE


def test_a_zero_dose_advice_has_the_safety_note() -> None:
    adv = advise_dose(HARD, resolve_reagent("NaOH"), solve(HARD).ph)
    assert adv.dose_mmol_l == 0.0
    assert adv.safety_note == SAFETY_NOTE


def test_every_curve_advice_has_the_safety_note_and_end_state_hazards() -> None:
    adv = advise_curve(SULFIDE, resolve_reagent("HCl"), 2.0, 21)
    assert adv.safety_note == SAFETY_NOTE
    assert _flag(adv.hazards, "h2s_release").severity == "danger"
    assert len(adv.curve.ph) == 21 and np.all(np.diff(adv.curve.ph) < 0)


def test_every_blend_advice_has_the_safety_note() -> None:
    adv = advise_blend([(1.0, HARD), (2.0, SULFIDE)])
    assert adv.safety_note == SAFETY_NOTE
    _flag(adv.hazards, "h2s_release")


def test_the_safety_note_says_advisory_operators_and_codes() -> None:
    # issue 4: advisory; confirmed by the plant's licensed operators; local codes govern
    assert "Advisory" in SAFETY_NOTE
    assert "licensed operators" in SAFETY_NOTE
    assert "local codes" in SAFETY_NOTE


def test_the_readme_carries_the_safety_note() -> None:
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    assert "advisory" in readme.lower()
    assert "licensed operators" in readme
    assert "Local codes" in readme or "local codes" in readme
