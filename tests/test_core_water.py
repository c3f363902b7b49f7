"""Pure water, closed and open to atmospheric CO2, computed by the core.

(pKw itself against IAPWS R11-07 is in tests/test_water.py; here the whole solve.)
"""

from __future__ import annotations

import pytest

from models.equilibrium import solve
from models.stream import Entry, StreamSpec

# pKw at 0.101325 MPa from IAPWS R11-07 with IAPWS-95 density [DERIVED, reference-data.md §2];
# the 0/25/50/100 °C values also match those remembered as quoted with R11-07 [MEMORY, M].
PKW_R11_07 = {0.0: 14.946, 25.0: 13.995, 50.0: 13.264, 100.0: 12.252}


def _water(**kwargs) -> StreamSpec:
    # "Nothing dissolved": a strong ion at zero amount (the composition may not be empty).
    return StreamSpec((Entry("Na+", 0.0, "mol/L"),), **kwargs)


@pytest.mark.parametrize("model", ["ideal", "davies"])
@pytest.mark.parametrize("t_c", sorted(PKW_R11_07))
def test_pure_water_is_neutral_at_half_pkw(t_c: float, model: str) -> None:
    # Source: IAPWS R11-07 (Bandura & Lvov 2006) via reference-data §2 [DERIVED], 3 decimals →
    # ±0.001 after halving. I ≈ 1e-7 mol/kg, so Davies and ideal agree.
    assert solve(_water(temperature_c=t_c, activity_model=model)).ph == pytest.approx(
        PKW_R11_07[t_c] / 2, abs=0.001
    )


def test_pure_water_has_equal_hydrogen_and_hydroxide_activity() -> None:
    # Definition of neutrality: a(H+) = a(OH−) = √Kw.
    res = solve(_water(temperature_c=37.0, activity_model="ideal"))
    act = {s.name: s.activity for s in res.species}
    assert act["H+"] == pytest.approx(act["OH-"], rel=1e-9)


def test_water_under_420_uatm_co2_has_ph_5_598() -> None:
    # Source: reference-data §6 [DERIVED] from Plummer & Busenberg (1982) KH and K1 and R11-07 Kw:
    # 420 µatm → pH 5.598 (today's atmosphere, issue 2).
    res = solve(_water(co2_partial_pressure_atm=420e-6))
    assert res.ph == pytest.approx(5.598, abs=0.002)


def test_water_under_10_to_minus_3_5_atm_co2_matches_stumm_and_morgan() -> None:
    # Source: Stumm & Morgan (1996) Aquatic Chemistry, 3rd ed.: pH 5.65–5.66 for
    # pCO2 = 10^−3.5 atm [MEMORY, M]; reference-data §6 derives 5.660 [DERIVED].
    res = solve(_water(co2_partial_pressure_atm=10**-3.5))
    assert 5.645 <= res.ph <= 5.665


def test_dissolved_co2_follows_henrys_law_at_10_to_minus_3_5_atm() -> None:
    # Source: reference-data §6 [DERIVED]: [H2CO3*] = KH·pCO2 = 10^−1.468 · 10^−3.5 = 1.08e-5 M
    # (Plummer & Busenberg 1982 KH); the open system holds this, whatever the pH.
    res = solve(_water(co2_partial_pressure_atm=10**-3.5))
    co2 = next(s for s in res.species if s.name == "CO2(aq)")
    assert co2.mol_l == pytest.approx(1.08e-5, rel=0.01)
    assert res.systems[0].open_to_gas


def test_more_co2_in_the_gas_gives_lower_ph() -> None:
    # Source: reference-data §6 [DERIVED]: 280 / 400 / 420 ppm → 5.686 / 5.609 / 5.598.
    phs = [solve(_water(co2_partial_pressure_atm=p)).ph for p in (280e-6, 400e-6, 420e-6)]
    assert phs == pytest.approx([5.686, 5.609, 5.598], abs=0.002)
    assert phs[0] > phs[1] > phs[2]
