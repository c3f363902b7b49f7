"""Blending streams by flow-weighted totals.

* Mixing conserves every total: C_mix = Σ Q_i C_i / Σ Q_i with additive volumes (mass
  balance, textbook stoichiometry); temperatures are flow-weighted (equal heat capacities,
  common practice, no source).
* Equal volumes of equimolar HCl and NaOH give a neutral solution, pH = pKw/2 = 6.998 at
  25 °C (textbook stoichiometry; pKw 13.995 from IAPWS R11-07, reference-data.md §2).
* Equal amounts of acetic acid and acetate: pH = pKa = 4.756 (Henderson–Hasselbalch,
  Harris, Quantitative Chemical Analysis, from memory; pKa from Harris App. G [READ],
  reference-data.md §4).
"""

from __future__ import annotations

import math

import pytest

from models.advice import advise_blend
from models.blend import blend
from models.equilibrium import solve
from models.errors import InputError
from models.results import EquilibriumResult
from models.stream import CustomSystem, Entry, StreamSpec

PKW_25 = 13.995
PKA_ACETIC = 4.756

HARD_WATER = StreamSpec(
    (
        Entry("Na+", 46.0, "mg/L"),
        Entry("Ca2+", 1.0, "mmol/L"),
        Entry("Cl-", 1.0, "mmol/L"),
        Entry("carbonate", 3.0, "mmol/L"),
    ),
    temperature_c=15.0,
    activity_model="davies",
)
HOT_BRINE = StreamSpec(
    (Entry("Na+", 10.0, "mmol/L"), Entry("Cl-", 4.0, "mmol/L"), Entry("acetate", 2.0, "mmol/L")),
    temperature_c=45.0,
    activity_model="davies",
)
CONDENSATE = StreamSpec(
    (Entry("Na+", 1.0, "mmol/kg"), Entry("carbonate", 2.0, "mg/L as C")),
    temperature_c=80.0,
    activity_model="extended_debye_huckel",
)


def _totals(res: EquilibriumResult) -> dict[str, float]:
    """Strong-ion amounts and system totals [mol/L] of a solved stream."""
    system_species = set()
    for sysres in res.systems:
        system_species |= set(sysres.fractions)
    out = {
        s.name: s.mol_l
        for s in res.species
        if s.name not in ("H+", "OH-") and s.name not in system_species
    }
    out.update({s.name: s.total_mol_l for s in res.systems})
    return out


def _mixed_value(b, name: str) -> float:
    (entry,) = [e for e in b.mixed.composition if e.name == name]
    assert entry.unit == "mol/L"
    return entry.value


@pytest.mark.parametrize("spec", [HARD_WATER, HOT_BRINE, CONDENSATE], ids=["hard", "brine", "mass-units-80C"])
def test_blend_of_one_stream_is_the_stream(spec: StreamSpec) -> None:
    alone = solve(spec)
    b = blend([(7.5, spec)])
    assert b.result.ph == pytest.approx(alone.ph, abs=1e-9)
    assert b.result.temperature_c == spec.temperature_c
    assert b.total_flow_m3_h == 7.5
    mine, theirs = _totals(b.result), _totals(alone)
    assert mine.keys() == theirs.keys()
    for name, value in theirs.items():
        assert mine[name] == pytest.approx(value, rel=1e-12), name


@pytest.mark.parametrize(("q1", "q2"), [(1.0, 1.0), (0.3, 12.0)])
def test_blend_of_a_stream_with_itself_is_the_stream(q1: float, q2: float) -> None:
    alone = solve(HARD_WATER)
    b = blend([(q1, HARD_WATER), (q2, HARD_WATER)])
    assert b.result.ph == pytest.approx(alone.ph, abs=1e-9)
    for name, value in _totals(alone).items():
        assert _totals(b.result)[name] == pytest.approx(value, rel=1e-12), name


def test_blend_totals_are_flow_weighted() -> None:
    # Na+: (1 · 2.0009 + 3 · 10) / 4 mmol/L (46 mg/L Na+ = 2.0009 mmol/L at 22.990 g/mol)
    b = blend([(1.0, HARD_WATER), (3.0, HOT_BRINE)])
    assert _mixed_value(b, "Na+") == pytest.approx((46.0 / 22.98977 + 3 * 10.0) / 4 * 1e-3, rel=1e-6)
    assert _mixed_value(b, "Cl-") == pytest.approx((1.0 + 3 * 4.0) / 4 * 1e-3, rel=1e-12)


def test_a_total_present_in_one_stream_is_diluted_by_its_flow_fraction() -> None:
    b = blend([(1.0, HARD_WATER), (3.0, HOT_BRINE)])
    assert _mixed_value(b, "Ca2+") == pytest.approx(1.0e-3 / 4, rel=1e-12)
    assert _mixed_value(b, "carbonate") == pytest.approx(3.0e-3 / 4, rel=1e-12)
    assert _mixed_value(b, "acetate") == pytest.approx(2.0e-3 * 3 / 4, rel=1e-12)


def test_mixed_result_carries_the_flow_weighted_totals() -> None:
    b = blend([(1.0, HARD_WATER), (3.0, HOT_BRINE)])
    na = next(s.mol_l for s in b.result.species if s.name == "Na+")
    assert na == pytest.approx(_mixed_value(b, "Na+"), rel=1e-9)


def test_blend_temperature_is_flow_weighted() -> None:
    b = blend([(1.0, HARD_WATER), (3.0, HOT_BRINE)])
    assert b.mixed.temperature_c == pytest.approx((15.0 + 3 * 45.0) / 4)
    assert b.result.temperature_c == pytest.approx(37.5)


def test_equal_flows_of_equimolar_strong_acid_and_base_give_neutral_water() -> None:
    acid = StreamSpec((Entry("Cl-", 2.0, "mmol/L"),), activity_model="ideal")
    base = StreamSpec((Entry("Na+", 2.0, "mmol/L"),), activity_model="ideal")
    b = blend([(5.0, acid), (5.0, base)])
    assert b.result.ph == pytest.approx(PKW_25 / 2.0, abs=0.005)


def test_equal_flows_of_acetic_acid_and_sodium_acetate_give_ph_pka() -> None:
    acid = StreamSpec((Entry("acetate", 100.0, "mmol/L"),), activity_model="ideal")
    salt = StreamSpec((Entry("acetate", 100.0, "mmol/L"), Entry("Na+", 100.0, "mmol/L")),
                      activity_model="ideal")
    b = blend([(2.0, acid), (2.0, salt)])
    # Henderson–Hasselbalch at [HA] = [A-] = 50 mM; [H+] ≪ 50 mM (≈ 3e-4 pH)
    assert b.result.ph == pytest.approx(PKA_ACETIC, abs=0.002)


def test_blend_is_not_the_average_ph() -> None:
    # pH is not conserved on mixing: 1:1 of 1 mM HCl (pH 3) and 1 mM NaCl (pH 7) holds
    # 0.5 mM H+ (textbook stoichiometry), pH ≈ 3.3, not the mean pH 5
    acid = StreamSpec((Entry("Cl-", 1.0, "mmol/L"),), activity_model="ideal")
    salt = StreamSpec((Entry("Cl-", 1.0, "mmol/L"), Entry("Na+", 1.0, "mmol/L")),
                      activity_model="ideal")
    b = blend([(1.0, acid), (1.0, salt)])
    assert b.result.ph == pytest.approx(-math.log10(0.5e-3 / 0.997048), abs=0.002)


def test_a_stream_open_to_co2_enters_with_its_equilibrium_carbonate() -> None:
    # 1 mM NaOH under 10^-3.5 atm CO2 takes up about 1 mM carbonate (pH ≈ 8.3)
    open_stream = StreamSpec((Entry("Na+", 1.0, "mmol/L"),), co2_partial_pressure_atm=10**-3.5,
                             activity_model="ideal")
    alone = solve(open_stream)
    b = blend([(1.0, open_stream)])
    carb = next(s for s in alone.systems if s.name == "carbonate")
    assert _mixed_value(b, "carbonate") == pytest.approx(carb.total_mol_l, rel=1e-12)
    assert b.result.ph == pytest.approx(alone.ph, abs=1e-6)
    assert any("solved closed" in w for w in b.warnings)


def test_custom_systems_are_carried_into_the_mixture() -> None:
    acid = CustomSystem("whey_acid", (4.2, 5.6))
    s1 = StreamSpec((Entry("whey_acid", 2.0, "mmol/L"), Entry("Na+", 1.0, "mmol/L")),
                    custom_systems=(acid,))
    s2 = StreamSpec((Entry("Na+", 3.0, "mmol/L"), Entry("Cl-", 3.0, "mmol/L")))
    b = blend([(1.0, s1), (1.0, s2)])
    assert b.mixed.custom_systems == (acid,)
    assert _mixed_value(b, "whey_acid") == pytest.approx(1.0e-3, rel=1e-12)


def test_a_custom_system_declared_differently_in_two_streams_is_refused() -> None:
    s1 = StreamSpec((Entry("x", 1.0, "mmol/L"),), custom_systems=(CustomSystem("x", (4.0,)),))
    s2 = StreamSpec((Entry("x", 1.0, "mmol/L"),), custom_systems=(CustomSystem("x", (5.0,)),))
    with pytest.raises(InputError) as err:
        blend([(1.0, s1), (1.0, s2)])
    assert err.value.field == "/streams/1/stream/custom_systems/0"


@pytest.mark.parametrize("flow", [0.0, -1.0, float("nan")])
def test_a_stream_without_a_positive_flow_is_refused(flow: float) -> None:
    with pytest.raises(InputError) as err:
        blend([(1.0, HARD_WATER), (flow, HOT_BRINE)])
    assert err.value.field == "/streams/1/flow_m3_h"


def test_a_blend_needs_a_stream() -> None:
    with pytest.raises(InputError):
        blend([])


def test_blend_advice_mixes_the_same_way() -> None:
    adv = advise_blend([(1.0, HARD_WATER), (3.0, HOT_BRINE)])
    assert adv.blend.result.ph == pytest.approx(blend([(1.0, HARD_WATER), (3.0, HOT_BRINE)]).result.ph)
