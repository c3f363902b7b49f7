"""IUPAC primary pH standards computed by the core at three temperatures.

Source of the check values: Buck et al. (2002) "Measurement of pH. Definition, standards, and
procedures", Pure Appl. Chem. 74, 2169–2200, Table 2 (pH(PS) of primary standards) — the table
body is [MEMORY, H], cross-checked cell by cell against an instrument-calibration table of the
NIST/DIN values [READ] (reference-data.md §1). Compositions are molal, entered as "mol/kg".

Tolerance 0.02 pH (issue 2, "How it is checked"). The temperatures are 0, 25 and 50 °C for every
buffer: the two ends of the IUPAC table and the reference temperature, chosen before looking.

Activity models: both ``davies`` (the service default) and ``extended_debye_huckel`` (Kielland
ion sizes) are checked. Why neither is closer than ≈0.01 everywhere:

* pH(PS) is defined through Harned cells evaluated with the Bates–Guggenheim convention,
  log γ(Cl−) = −A√I/(1 + 1.5√I). At I = 0.1 (phosphate, carbonate) Davies gives
  log γ(z=2) − log γ(z=1) about 0.006 higher than that form, extended Debye–Hückel with
  å = 4–4.5 Å (B·å ≈ 1.3–1.5) about 0.005–0.014 lower, so Davies lands high and
  extended DH low on the phosphate and carbonate standards.
* The pK fits themselves: the "pK + Bates–Guggenheim" route of reference-data §1 [DERIVED]
  already gives 6.997 vs 6.984 for phosphate at 0 °C (+0.013) from the Bates & Acree pK2 fit.

Known failure, kept at the honest tolerance: borax at 0 °C is 0.022–0.023 low with either model
(see ``BORAX_0C_REASON``).
"""

from __future__ import annotations

import pytest

from models.equilibrium import solve
from models.stream import CustomSystem, Entry, StreamSpec

TOLERANCE_PH = 0.02
TEMPERATURES_C = (0.0, 25.0, 50.0)
MODELS = ("davies", "extended_debye_huckel")

# Buck et al. (2002) Table 2 [MEMORY, H; cross-checked READ], reference-data.md §1.
IUPAC_PHOSPHATE_1_1 = {0.0: 6.984, 25.0: 6.865, 50.0: 6.833}
IUPAC_KHP = {0.0: 4.000, 25.0: 4.005, 50.0: 4.050}
IUPAC_BORAX = {0.0: 9.464, 25.0: 9.180, 50.0: 9.011}   # 50 °C: other table 9.010
IUPAC_CARBONATE = {0.0: 10.317, 25.0: 10.012, 50.0: 9.828}

BORAX_0C_REASON = (
    "0.01 mol/kg borax at 0 °C computes 9.442 (Davies) / 9.441 (ext. DH) vs IUPAC 9.464. "
    "Not the activity model (pH − pK = log(m B(OH)4−/m B(OH)3) + log γ(B(OH)4−) is "
    "independent of γ(H+); Davies and BG give log γ = −0.058 at I = 0.02) and not a solver bug "
    "(pK + log γ by hand gives the same 9.442). The misfit grows smoothly toward low "
    "temperature (+0.001 at 50, +0.006 at 25, +0.012 at 10, +0.022 at 0 °C), the signature of "
    "an exothermic polyborate equilibrium (B(OH)4− + 2 B(OH)3 ⇌ B3O3(OH)4−, which raises pH): "
    "the standard holds 0.04 mol/kg boron, above the ≈0.025 mol/L where polyborates form, and "
    "the database models monomeric boric acid only (thermo.toml borate notes). The boric-acid "
    "pK fit (Manov, DeLollis & Acree 1944) evaluated at the end of its range is the other "
    "candidate."
)

# Phthalic acid is not built in. pK1 and pK2 as functions of temperature, pK = a/T + b + c·T:
# Hamer, Pinching & Acree (1945) J. Res. NBS 35, 539 (pK1) and Hamer & Acree (1945) J. Res. NBS
# 35, 381 (pK2) [MEMORY, L: coefficients recalled, not read]. At 25 °C they give 2.950 / 5.406,
# against 2.950 / 5.408 tabulated by Robinson & Stokes, Electrolyte Solutions [MEMORY, M]. The
# fits imply ΔH ≈ −2.7 and −2.1 kJ/mol at 25 °C but curve (ΔCp ≠ 0: pK2 has a minimum near
# 20 °C), which a constant-ΔH custom system cannot follow over 25 K; so the pK at the stream's
# temperature is given directly (ΔH = 0 keeps it fixed).
PHTHALIC_PK_FITS = ((561.57, -1.2843, 0.0078833), (2175.83, -9.55294, 0.025694))


def _phthalic_pka(t_c: float) -> tuple[float, float]:
    t_k = t_c + 273.15
    return tuple(a / t_k + b + c * t_k for a, b, c in PHTHALIC_PK_FITS)  # type: ignore[return-value]


def _molal(*entries: tuple[str, float], **kwargs) -> StreamSpec:
    return StreamSpec(tuple(Entry(name, value, "mol/kg") for name, value in entries), **kwargs)


def _ph(spec: StreamSpec) -> float:
    return solve(spec).ph


def _phosphate(t_c: float, model: str) -> StreamSpec:
    # 0.025 mol/kg KH2PO4 + 0.025 mol/kg Na2HPO4.
    return _molal(("K+", 0.025), ("Na+", 0.050), ("phosphate", 0.050),
                  temperature_c=t_c, activity_model=model)


def _khp(t_c: float, model: str) -> StreamSpec:
    # 0.05 mol/kg KHC8H4O4.
    phthalic = CustomSystem("phthalic", _phthalic_pka(t_c), 0, None)
    return _molal(("K+", 0.050), ("phthalic", 0.050), temperature_c=t_c,
                  activity_model=model, custom_systems=(phthalic,))


def _borax(t_c: float, model: str) -> StreamSpec:
    # 0.01 mol/kg Na2B4O7 → 0.02 mol/kg Na+ and 0.04 mol/kg boron (2 B(OH)3 + 2 B(OH)4−).
    return _molal(("Na+", 0.020), ("borate", 0.040), temperature_c=t_c, activity_model=model)


def _carbonate(t_c: float, model: str) -> StreamSpec:
    # 0.025 mol/kg NaHCO3 + 0.025 mol/kg Na2CO3.
    return _molal(("Na+", 0.075), ("carbonate", 0.050), temperature_c=t_c, activity_model=model)


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("t_c", TEMPERATURES_C)
def test_phosphate_1_1_standard_matches_iupac(t_c: float, model: str) -> None:
    # Source: Buck et al. (2002) PAC 74, 2169, Table 2 [MEMORY, H; READ cross-check].
    assert _ph(_phosphate(t_c, model)) == pytest.approx(IUPAC_PHOSPHATE_1_1[t_c], abs=TOLERANCE_PH)


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("t_c", TEMPERATURES_C)
def test_potassium_hydrogen_phthalate_standard_matches_iupac(t_c: float, model: str) -> None:
    # Source: Buck et al. (2002) PAC 74, 2169, Table 2 [MEMORY, H; READ cross-check]; phthalic
    # pK(T) from Hamer et al. (1945) [MEMORY, L].
    assert _ph(_khp(t_c, model)) == pytest.approx(IUPAC_KHP[t_c], abs=TOLERANCE_PH)


def _borax_cases():
    for t_c in TEMPERATURES_C:
        for model in MODELS:
            marks = [pytest.mark.xfail(strict=True, reason=BORAX_0C_REASON)] if t_c == 0.0 else []
            yield pytest.param(t_c, model, marks=marks, id=f"{t_c:g}C-{model}")


@pytest.mark.parametrize(("t_c", "model"), list(_borax_cases()))
def test_borax_standard_matches_iupac(t_c: float, model: str) -> None:
    # Source: Buck et al. (2002) PAC 74, 2169, Table 2 [MEMORY, H; READ cross-check].
    assert _ph(_borax(t_c, model)) == pytest.approx(IUPAC_BORAX[t_c], abs=TOLERANCE_PH)


@pytest.mark.parametrize("model", MODELS)
def test_borax_at_0c_misses_iupac_by_the_documented_amount(model: str) -> None:
    # Pins the size of the known 0 °C borax misfit (see BORAX_0C_REASON), so that a change in
    # the data or the model that moves it is noticed: 0.02 < IUPAC − computed < 0.03.
    shortfall = IUPAC_BORAX[0.0] - _ph(_borax(0.0, model))
    assert 0.02 < shortfall < 0.03


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("t_c", TEMPERATURES_C)
def test_bicarbonate_carbonate_standard_matches_iupac(t_c: float, model: str) -> None:
    # Source: Buck et al. (2002) PAC 74, 2169, Table 2 [MEMORY, H; READ cross-check]; also
    # 10.012 at 25 °C in "Two new standards for the pH scale", J. Res. NBS 73A, 37 (1969) [READ].
    assert _ph(_carbonate(t_c, model)) == pytest.approx(IUPAC_CARBONATE[t_c], abs=TOLERANCE_PH)


@pytest.mark.parametrize(
    ("make", "table"),
    [(_phosphate, IUPAC_PHOSPHATE_1_1), (_borax, IUPAC_BORAX), (_carbonate, IUPAC_CARBONATE)],
    ids=["phosphate", "borax", "carbonate"],
)
def test_standard_buffers_fall_with_temperature_from_25_to_50c(make, table) -> None:
    # Source: the sign of the temperature coefficient in Buck et al. (2002) Table 2: these three
    # standards all lose pH between 25 and 50 °C; the computed drop agrees within 0.02.
    drop = _ph(make(25.0, "davies")) - _ph(make(50.0, "davies"))
    assert drop > 0
    assert drop == pytest.approx(table[25.0] - table[50.0], abs=TOLERANCE_PH)
