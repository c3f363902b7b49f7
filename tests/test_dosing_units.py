"""A dose of active substance expressed as product: strengths, densities, flows.

Outside values (reference-data.md §8, CRC Handbook "Concentrative properties of aqueous
solutions", 20 °C, each tagged there):
* NaOH 50 % w/w: 1.5253 kg/L, 19.07 mol/L [MEMORY, H; molarity DERIVED];
  NaOH 25 %: ≈ 1.274 kg/L (between CRC 24 % 1.2629 and 28 % 1.3064) [MEMORY, M].
* H2SO4 98 %: 18.35 mol/L [MEMORY, H; DERIVED]. HCl 32 %: 10.17 mol/L [READ].
* Molar masses from the IUPAC standard atomic weights (conventional values Na 22.990,
  O 15.999, H 1.008, S 32.06, Cl 35.45, Ca 40.078; from memory): NaOH 39.997,
  H2SO4 98.07, Ca(OH)2 74.09 g/mol.
Unit identities (mg/L = mmol/L × g/mol; L/m³ = (g/m³)/(w·ρ·1000); L/h = L/m³ × m³/h) are
definitions (common practice, no source).
"""

from __future__ import annotations

import pytest

from models.advice import advise_dose, resolve_reagent
from models.stream import Entry, StreamSpec

STREAM = StreamSpec(
    (Entry("Na+", 2.0, "mmol/L"), Entry("carbonate", 2.0, "mmol/L")), activity_model="ideal"
)
FLOW = 12.0  # m³/h
RHO_NAOH_50, RHO_NAOH_25 = 1.5253, 1.274
M_NAOH, M_H2SO4, M_LIME = 39.997, 98.07, 74.09


def _advice(reagent: str, setpoint: float, **kw):
    return advise_dose(STREAM, resolve_reagent(reagent, **kw), setpoint, flow_m3_h=FLOW)


def test_the_dose_of_active_substance_does_not_depend_on_the_product_strength() -> None:
    a50 = _advice("NaOH", 10.0, strength_pct_w=50.0)
    a25 = _advice("NaOH", 10.0, strength_pct_w=25.0)
    assert a25.dose_mmol_l == pytest.approx(a50.dose_mmol_l, rel=1e-12)


def test_product_mass_of_two_strengths_converts_by_their_mass_fractions() -> None:
    a50 = _advice("NaOH", 10.0, strength_pct_w=50.0)
    a25 = _advice("NaOH", 10.0, strength_pct_w=25.0)
    assert a25.amounts["product_mg_l"] / a50.amounts["product_mg_l"] == pytest.approx(50.0 / 25.0)


def test_product_volume_of_two_strengths_converts_by_mass_fractions_and_densities() -> None:
    # V ∝ 1/(w ρ): V25/V50 = (0.50 · 1.5253) / (0.25 · 1.274), CRC densities; the 25 %
    # density is interpolated [MEMORY, M] → 0.2 %
    a50 = _advice("NaOH", 10.0, strength_pct_w=50.0)
    a25 = _advice("NaOH", 10.0, strength_pct_w=25.0)
    ratio = a25.amounts["product_l_per_m3"] / a50.amounts["product_l_per_m3"]
    assert ratio == pytest.approx((0.50 * RHO_NAOH_50) / (0.25 * RHO_NAOH_25), rel=2e-3)


def test_active_substance_mg_l_is_mmol_l_times_molar_mass() -> None:
    for reagent, setpoint, mass in (("NaOH", 10.0, M_NAOH), ("H2SO4", 6.0, M_H2SO4),
                                    ("Ca(OH)2", 9.5, M_LIME)):
        adv = _advice(reagent, setpoint)
        assert adv.amounts["dose_mg_l"] == pytest.approx(adv.dose_mmol_l * mass, rel=1e-4)


@pytest.mark.parametrize(
    ("reagent", "strength", "setpoint", "molarity"),
    [("NaOH", 50.0, 10.0, 19.07), ("H2SO4", 98.0, 6.0, 18.35), ("HCl", 32.0, 6.0, 10.17)],
)
def test_product_l_per_m3_is_the_dose_over_the_product_molarity(
    reagent: str, strength: float, setpoint: float, molarity: float
) -> None:
    # dose [mmol/L] = [mol/m³]; divided by the product's mol/L gives L of product per m³
    adv = _advice(reagent, setpoint, strength_pct_w=strength)
    assert adv.amounts["product_l_per_m3"] == pytest.approx(adv.dose_mmol_l / molarity, rel=1.5e-3)


def test_product_l_h_is_l_per_m3_times_the_flow() -> None:
    adv = _advice("NaOH", 10.0)
    assert adv.amounts["product_l_h"] == pytest.approx(adv.amounts["product_l_per_m3"] * FLOW)


def test_product_kg_h_is_mg_l_times_the_flow() -> None:
    # mg/L = g/m³; × m³/h = g/h; / 1000 = kg/h
    adv = _advice("NaOH", 10.0)
    assert adv.amounts["product_kg_h"] == pytest.approx(adv.amounts["product_mg_l"] * FLOW / 1e3)


def test_product_kg_h_is_l_h_times_the_density() -> None:
    adv = _advice("NaOH", 10.0, strength_pct_w=50.0)
    assert adv.amounts["product_kg_h"] == pytest.approx(
        adv.amounts["product_l_h"] * RHO_NAOH_50, rel=1e-4
    )


def test_lime_slurry_product_counts_solids_fraction_and_purity() -> None:
    # 10 % slurry of 90 % pure hydrated lime: product = active / 0.90 / 0.10
    adv = _advice("Ca(OH)2", 9.5, strength_pct_w=10.0, purity_pct_w=90.0)
    assert adv.amounts["product_mg_l"] == pytest.approx(adv.amounts["dose_mg_l"] / 0.9 / 0.1)


def test_a_gas_is_dosed_by_mass_with_no_product_volume() -> None:
    adv = advise_dose(STREAM, resolve_reagent("CO2"), 7.0, flow_m3_h=FLOW)
    assert adv.amounts["product_l_per_m3"] is None
    assert adv.amounts["product_l_h"] is None
    # CO2 44.009 g/mol (IUPAC atomic weights, from memory)
    assert adv.amounts["dose_mg_l"] == pytest.approx(adv.dose_mmol_l * 44.009, rel=1e-4)
    assert adv.amounts["product_kg_h"] == pytest.approx(adv.amounts["dose_mg_l"] * FLOW / 1e3)
