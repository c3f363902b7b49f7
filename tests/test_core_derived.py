"""Derived quantities of the core: buffer capacity, alkalinity, Langelier index, conductivity,
and textbook worked examples of equilibrium pH.

Amounts are mol/L unless stated; 25 °C unless stated.
"""

from __future__ import annotations

import math

import pytest

from models import water
from models.derived import langelier_ph_s
from models.equilibrium import solve
from models.stream import CustomSystem, Entry, StreamSpec

LN10 = math.log(10.0)


def _stream(*entries: tuple[str, float], unit: str = "mol/L", **kwargs) -> StreamSpec:
    return StreamSpec(tuple(Entry(n, v, unit) for n, v in entries), **kwargs)


def _species(res, name: str):
    return next(s for s in res.species if s.name == name)


# --------------------------------------------------------------------------------------------
# Buffer capacity β = dC_base/dpH
# --------------------------------------------------------------------------------------------

BETA_STREAMS = {
    "acetate-buffer": (("acetate", 0.010), ("Na+", 0.005)),
    "bicarbonate": (("carbonate", 0.002), ("Na+", 0.002)),
    "phosphate-ammonia": (("phosphate", 0.001), ("ammonia", 0.002), ("Na+", 0.0015),
                          ("Cl-", 0.001)),
    "hard-water": (("carbonate", 0.004), ("Ca2+", 0.0015), ("Na+", 0.001), ("Cl-", 0.0005)),
}


def _finite_difference_beta(entries, model: str, t_c: float = 25.0) -> float:
    """β [mmol/L per pH] of the full solve: ±δ of Na+ (a strong base) around the stream."""
    delta = 1e-6  # mol/L
    comp = dict(entries)

    def ph_with(extra: float) -> float:
        c = dict(comp)
        c["Na+"] = c.get("Na+", 0.0) + extra
        return solve(_stream(*c.items(), temperature_c=t_c, activity_model=model)).ph

    return 2 * delta * 1e3 / (ph_with(delta) - ph_with(-delta))


@pytest.mark.parametrize("model", ["ideal", "davies", "extended_debye_huckel"])
@pytest.mark.parametrize("name", BETA_STREAMS)
def test_reported_buffer_capacity_equals_finite_difference_of_the_full_solve(name, model) -> None:
    # Definition (issue 2 §6; Van Slyke 1922): β = dC_base/dpH. Ideal: the analytic expression;
    # with Davies / extended DH: the strong-base titration including its ionic-strength effect.
    entries = BETA_STREAMS[name]
    reported = solve(_stream(*entries, activity_model=model)).buffer_capacity_mmol_l_per_ph
    assert reported == pytest.approx(_finite_difference_beta(entries, model), rel=1e-4)


def test_buffer_capacity_at_hot_temperature_equals_finite_difference() -> None:
    entries = BETA_STREAMS["phosphate-ammonia"]
    reported = solve(_stream(*entries, temperature_c=70.0)).buffer_capacity_mmol_l_per_ph
    assert reported == pytest.approx(_finite_difference_beta(entries, "davies", 70.0), rel=1e-4)


@pytest.mark.parametrize(("total", "expected"), [(0.010, 5.80e-3), (0.10, 5.76e-2)])
def test_buffer_capacity_at_pka_is_van_slyke_0_576_c(total: float, expected: float) -> None:
    # Source: Van Slyke (1922): at pH = pKa, β = ln10·C/4 = 0.576·C (+ water terms) [MEMORY, H];
    # reference-data §6 [DERIVED]: 0.010 M acetate 5.80e-3, 0.10 M 5.76e-2 mol/(L·pH).
    # pKa 4.756: Harris, Quantitative Chemical Analysis, App. G [READ]. Ideal solution, the
    # stream pinned at pH = pKa by balancing on Na+.
    acetic = CustomSystem("acetic", (4.756,), 0, None)
    res = solve(_stream(("acetic", total), ("Na+", 0.0), activity_model="ideal",
                        custom_systems=(acetic,), measured_ph=4.756, balance_on="Na+"))
    assert res.buffer_capacity_mmol_l_per_ph * 1e-3 == pytest.approx(expected, rel=0.005)
    assert res.buffer_capacity_mmol_l_per_ph * 1e-3 > 0.576 * total


@pytest.mark.parametrize(("ph", "expected"), [(6.35, 1.153e-3), (7.0, 6.93e-4), (8.3, 9.77e-5),
                                              (10.33, 1.650e-3)])
def test_carbonate_buffer_capacity_matches_the_closed_form(ph: float, expected: float) -> None:
    # Source: reference-data §6 [DERIVED]: β = ln10·(C_T[α1(α0+α2) + 4α0α2] + [H+] + [OH−]),
    # C_T = 2 mM, Plummer & Busenberg (1982) pK1/pK2; the minimum near pH 8.3.
    res = solve(_stream(("carbonate", 0.002), ("Na+", 0.0), activity_model="ideal",
                        measured_ph=ph, balance_on="Na+"))
    assert res.buffer_capacity_mmol_l_per_ph * 1e-3 == pytest.approx(expected, rel=0.01)


# --------------------------------------------------------------------------------------------
# Alkalinity, Standard Methods 2320 B (end points 4.5 and 8.3)
# --------------------------------------------------------------------------------------------

def test_one_meq_per_litre_is_50_04_mg_per_litre_as_caco3() -> None:
    # Source: Standard Methods 2320: 1 meq/L = M(CaCO3)/2 = 50.04 mg/L as CaCO3 [MEMORY, H].
    alk = solve(_stream(("carbonate", 0.003), ("Na+", 0.0035))).alkalinity
    assert alk.total_mg_l_as_caco3 / alk.total_meq_l == pytest.approx(50.04, abs=0.005)
    assert alk.phenolphthalein_mg_l_as_caco3 / alk.phenolphthalein_meq_l == pytest.approx(
        50.04, abs=0.005
    )


def test_alkalinity_end_points_are_those_of_standard_methods_2320_b() -> None:
    # Source: Standard Methods 2320 B: total alkalinity to pH 4.5, phenolphthalein to 8.3
    # [MEMORY, M–H; READ: IUPAC Gold Book "phenolphthalein alkalinity", pH 8.3].
    alk = solve(_stream(("carbonate", 0.001), ("Na+", 0.001))).alkalinity
    assert (alk.total_endpoint_ph, alk.phenolphthalein_endpoint_ph) == (4.5, 8.3)


@pytest.mark.parametrize("model", ["ideal", "davies"])
@pytest.mark.parametrize(
    "entries",
    [(("carbonate", 0.002), ("Na+", 0.0025), ("Cl-", 0.0003)),
     (("carbonate", 0.005), ("Ca2+", 0.0015), ("Na+", 0.004), ("Cl-", 0.002),
      ("ammonia", 0.0002))],
    ids=["soft", "hard"],
)
def test_reported_alkalinity_fed_back_with_its_ph_reproduces_the_carbonate_total(entries, model):
    # Standard Methods 2320 (alkalinity ↔ carbonate at a measured pH): the stream's reported
    # total alkalinity (mg/L as CaCO3) and pH, with Na+ left out and found by balance_on, give
    # back its carbonate total and its Na+.
    original = solve(_stream(*entries, activity_model=model))
    comp = dict(entries)
    carbonate, sodium = comp.pop("carbonate"), comp.pop("Na+")
    fed_back = [Entry(n, v, "mol/L") for n, v in comp.items()] + [
        Entry("alkalinity", original.alkalinity.total_mg_l_as_caco3, "mg/L as CaCO3")]
    res = solve(StreamSpec(tuple(fed_back), activity_model=model, measured_ph=original.ph,
                           balance_on="Na+"))
    assert res.calibration.carbonate_from_alkalinity_mol_l == pytest.approx(carbonate, rel=1e-8)
    assert res.calibration.added_mol_l == pytest.approx(sodium, rel=1e-8)


@pytest.mark.parametrize("ph", [5.0, 6.5, 7.5, 8.29])
def test_phenolphthalein_alkalinity_is_zero_below_ph_8_3(ph: float) -> None:
    # Source: Standard Methods 2320 B: P alkalinity is the acid to pH 8.3; a sample already
    # below 8.3 has none.
    res = solve(_stream(("carbonate", 0.002), ("Na+", 0.0), measured_ph=ph, balance_on="Na+"))
    assert res.alkalinity.phenolphthalein_meq_l == 0.0
    assert res.alkalinity.total_meq_l > 0.0


def test_phenolphthalein_alkalinity_of_sodium_carbonate_is_its_carbonate() -> None:
    # Standard Methods 2320 B: to pH 8.3 CO3^2− becomes HCO3^−, so P alkalinity of 1 mM Na2CO3 is
    # ≈ 1 meq/L (minus the small CO3/HCO3 residue at 8.3) and T ≈ 2 meq/L.
    alk = solve(_stream(("carbonate", 0.001), ("Na+", 0.002), activity_model="ideal")).alkalinity
    assert alk.phenolphthalein_meq_l == pytest.approx(1.0, abs=0.02)
    assert alk.total_meq_l == pytest.approx(2.0, abs=0.04)


def test_alkalinity_of_a_carbonate_only_stream_matches_alpha_fractions_at_the_end_point() -> None:
    # Analytic (ideal, closed titration vessel): T = C_T[(α1+2α2)(pH) − (α1+2α2)(4.5)]
    #   + ([OH−] − [H+])(pH) − ([OH−] − [H+])(4.5),
    # with pK1 6.352, pK2 10.329 (Plummer & Busenberg 1982, reference-data §3.1 [DERIVED]) and
    # pKw 13.995 (IAPWS R11-07, reference-data §2). Molal ≈ molar to 0.3 % here.
    pk1, pk2, pkw = 6.352, 10.329, 13.995

    def charge_carried(c_t: float, ph: float) -> float:
        h = 10**-ph
        k1, k2 = 10**-pk1, 10**-pk2
        d = h * h + k1 * h + k1 * k2
        a1, a2 = k1 * h / d, k1 * k2 / d
        return c_t * (a1 + 2 * a2) + 10 ** (ph - pkw) - h

    c_t = 0.0015
    res = solve(_stream(("carbonate", c_t), ("Na+", 0.0025), activity_model="ideal"))
    expected = (charge_carried(c_t, res.ph) - charge_carried(c_t, 4.5)) * 1e3
    assert res.alkalinity.total_meq_l == pytest.approx(expected, rel=0.004)
    expected_p = (charge_carried(c_t, res.ph) - charge_carried(c_t, 8.3)) * 1e3
    assert res.alkalinity.phenolphthalein_meq_l == pytest.approx(expected_p, rel=0.004)


# --------------------------------------------------------------------------------------------
# Worked examples
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("model", ["ideal", "davies"])
def test_tenth_molar_acetic_acid_has_ph_2_88(model: str) -> None:
    # Source: general/analytical chemistry texts (e.g. Harris, QCA) pH 2.88 [MEMORY, M];
    # reference-data §6 2.881 [DERIVED]. −log a(H+) of a lone weak acid hardly depends on γ.
    assert solve(_stream(("acetate", 0.10), activity_model=model)).ph == pytest.approx(2.881, abs=0.005)


def test_millimolar_sodium_bicarbonate_is_near_ph_8_3() -> None:
    # Source: Snoeyink & Jenkins (1980); Stumm & Morgan (1996): ≈ (pK1 + pK2)/2 ≈ 8.3 [MEMORY, M];
    # ideal 8.297 [DERIVED, reference-data §6].
    res = solve(_stream(("carbonate", 1.0e-3), ("Na+", 1.0e-3), activity_model="ideal"))
    assert res.ph == pytest.approx(8.297, abs=0.002)
    assert res.ph == pytest.approx(8.3, abs=0.05)


def test_millimolar_sodium_carbonate_ideal_ph_is_10_562() -> None:
    # Source: reference-data §6 [DERIVED]; textbooks ≈ 10.5–10.6 [MEMORY].
    res = solve(_stream(("carbonate", 1.0e-3), ("Na+", 2.0e-3), activity_model="ideal"))
    assert res.ph == pytest.approx(10.562, abs=0.002)


@pytest.mark.parametrize(("total", "expected"), [(0.10, 11.12), (0.010, 10.61)])
def test_aqueous_ammonia_ph(total: float, expected: float) -> None:
    # Source: general chemistry texts ≈ 11.1 / 10.6 [MEMORY]; reference-data §6 11.117 / 10.610
    # [DERIVED] with pKa(NH4+) 9.244 (Bates & Pinching 1949).
    assert solve(_stream(("ammonia", total), activity_model="ideal")).ph == pytest.approx(
        expected, abs=0.01
    )


# --------------------------------------------------------------------------------------------
# Langelier saturation index (Standard Methods 2330 B) and conductivity (Standard Methods 2510)
# --------------------------------------------------------------------------------------------

LANGELIER_EXAMPLES = [
    # t °C, pK2, pKs(calcite) (Plummer & Busenberg 1982, reference-data §3.1 [DERIVED]),
    # [Ca2+] M, [HCO3-] M, I (= 2.5e-5 × TDS, Langelier), expected pHs [DERIVED, §7]
    (25.0, 10.329, 8.480, 9.99e-4, 2.00e-3, 0.005, 7.714),
    (60.0, 10.144, 8.759, 9.99e-4, 2.00e-3, 0.005, 7.262),
    (10.0, 10.488, 8.410, 4.996e-4, 8.00e-4, 0.0025, 8.593),
]


@pytest.mark.parametrize(("t_c", "pk2", "pks", "ca", "hco3", "ionic", "expected"),
                         LANGELIER_EXAMPLES, ids=["25C", "60C", "10C"])
def test_langelier_ph_s_matches_the_worked_example(t_c, pk2, pks, ca, hco3, ionic, expected) -> None:
    # Source: Standard Methods 2330 B / Langelier (1936) J. AWWA 28, 1500 [MEMORY, M]; worked
    # example of reference-data §7 [DERIVED], ±0.02 (A from a different ε moves pHs ≈ 0.01).
    a = water.debye_huckel_a(t_c)
    assert float(langelier_ph_s(pk2, pks, ca, hco3, ionic, a)) == pytest.approx(expected, abs=0.02)


def test_full_stream_langelier_index_matches_the_worked_example() -> None:
    # Same water as the 25 °C example (pH 8.0, Ca hardness and alkalinity 100 mg/L as CaCO3):
    # LSI = +0.29 [DERIVED, reference-data §7]. The stream's own ionic strength and [HCO3−]
    # replace the TDS estimate and the alkalinity, hence ±0.03.
    res = solve(StreamSpec((Entry("Ca2+", 100.0, "mg/L as CaCO3"),
                            Entry("alkalinity", 100.0, "mg/L as CaCO3"),
                            Entry("Na+", 1.0, "mmol/L"), Entry("Cl-", 1.0, "mmol/L")),
                           measured_ph=8.0, balance_on="Cl-"))
    assert res.langelier_index == pytest.approx(0.29, abs=0.03)
    assert res.calcite_saturation_index > 0


def test_conductivity_of_0_01_molar_kcl_is_1412_us_per_cm() -> None:
    # Source: Standard Methods 2510 calibration standard, 0.0100 M KCl at 25 °C:
    # 1412–1413 µS/cm [MEMORY, H]; within 2 % (issue 2: an estimate).
    res = solve(_stream(("K+", 0.0100), ("Cl-", 0.0100)))
    assert res.conductivity_estimate_us_cm == pytest.approx(1412.0, rel=0.02)


def test_conductivity_estimate_is_below_the_sum_of_limiting_conductivities() -> None:
    # Kohlrausch: molar conductivity falls below Λ° = 149.79 S cm²/mol (CRC, λ°(K+) + λ°(Cl−)
    # [READ/MEMORY, H]) as concentration rises — the ideal sum would overshoot by ≈ 6 %.
    res = solve(_stream(("K+", 0.0100), ("Cl-", 0.0100)))
    assert res.conductivity_estimate_us_cm < 0.0100 * 149.79 * 1e3
