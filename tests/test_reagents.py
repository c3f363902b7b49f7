"""Reagent catalogue: data provenance, stoichiometry, densities and product amounts.

Outside values, each named where used (reference-data.md §8):
* 50 % NaOH 19.07 mol/L, 98 % H2SO4 18.35 mol/L – CRC "Concentrative properties of
  aqueous solutions", 20 °C [MEMORY, H; molarity DERIVED there].
* 32 % HCl 1.159 kg/L and 10.17 mol/L, 36 % HCl 11.64 mol/L – HCl property table at 20 °C [READ].
* Saturated Ca(OH)2 0.0203 mol/kg at 25 °C – Bates, Bower & Smith (1956) [READ]; the
  handbook solubility series is ~6 % higher, so ±7 % (reference-data.md §8).
"""

from __future__ import annotations

import math
import tomllib
from typing import Any

import numpy as np
import pytest

from models.errors import InputError
from models.masses import atoms, formula_mass_g_mol, split_charge
from models.reagents import (
    DATA_FILE,
    DENSITY_TEMPERATURE_BAND_C,
    REAGENT_FORMS,
    Reagent,
    catalogue_version,
    custom_reagent,
    load_reagents,
    product_amounts,
)

EXPECTED = ("NaOH", "KOH", "Ca(OH)2", "Mg(OH)2", "Na2CO3", "NaHCO3", "H2SO4", "HCl", "HNO3", "CO2")
PROVENANCE = {"READ", "MEMORY", "DERIVED", "DEFINITION"}


@pytest.fixture(scope="module")
def reagents() -> dict[str, Reagent]:
    return load_reagents()


@pytest.fixture(scope="module")
def doc() -> dict[str, Any]:
    with DATA_FILE.open("rb") as fh:
        return tomllib.load(fh)


def _molarity(r: Reagent, pct: float) -> float:
    return r.density_kg_l(pct) * 1000.0 * pct / 100.0 / r.molar_mass_g_mol


# --- the data file ---------------------------------------------------------------


def _is_number(x: object) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def _walk(node: object, path: str, out: list[tuple[str, dict[str, Any]]]) -> None:
    if isinstance(node, dict):
        if any(_is_number(v) or (isinstance(v, list) and any(_is_number(i) for i in v))
               for v in node.values()):
            out.append((path, node))
        for key, value in node.items():
            _walk(value, f"{path}/{key}", out)
    elif isinstance(node, list):
        for i, item in enumerate(node):
            _walk(item, f"{path}/{i}", out)


def test_every_number_in_the_data_file_has_a_source(doc: dict[str, Any]) -> None:
    tables: list[tuple[str, dict[str, Any]]] = []
    _walk(doc, "", tables)
    checked = 0
    for path, table in tables:
        if path.endswith("/adds"):
            continue  # stoichiometry: checked against the formula below
        assert table.get("source") in doc["sources"], f"{path} has no known source"
        assert table.get("provenance") in PROVENANCE, f"{path} has no provenance tag"
        if table["provenance"] == "MEMORY":
            assert table.get("confidence") in {"H", "M", "L"}, f"{path}: MEMORY needs a confidence"
        if table["provenance"] == "DERIVED":
            assert table.get("derivation"), f"{path}: DERIVED needs its derivation"
        checked += 1
    assert checked > 100  # every density row, solubility row, strength, purity …
    assert catalogue_version() == doc["version"]


def test_catalogue_has_the_agreed_reagents(reagents: dict[str, Reagent]) -> None:
    assert tuple(reagents) == EXPECTED
    for r in reagents.values():
        assert r.form in REAGENT_FORMS and r.kind in ("acid", "base")
        assert r.molar_mass_g_mol == formula_mass_g_mol(r.formula)
        assert r.sources and r.hazards


def test_adds_agree_with_the_formula(reagents: dict[str, Reagent]) -> None:
    """Each strong ion's atoms, times its coefficient, are contained in the formula."""
    for r in reagents.values():
        formula_atoms = atoms(r.formula)
        for species, n in r.adds.items():
            body, charge = split_charge(species)
            if charge:
                for element, k in atoms(body).items():
                    assert formula_atoms.get(element, 0) >= k * n, (r.name, species)
        # monatomic cations: exactly as many as in the formula
        for species, n in r.adds.items():
            body, charge = split_charge(species)
            if charge > 0 and len(atoms(body)) == 1:
                assert formula_atoms[body] == n


def test_proton_bookkeeping_of_the_documented_examples(reagents: dict[str, Reagent]) -> None:
    """Net strong-ion charge per mole: + for strong bases, − for strong acids, 0 for CO2/H2SO4."""
    def strong_charge(r: Reagent) -> float:
        return sum(split_charge(s)[1] * n for s, n in r.adds.items())

    assert reagents["NaOH"].adds == {"Na+": 1.0}
    assert reagents["Ca(OH)2"].adds == {"Ca2+": 1.0}
    assert reagents["Na2CO3"].adds == {"Na+": 2.0, "carbonate": 1.0}
    assert reagents["H2SO4"].adds == {"sulfate": 1.0}
    assert reagents["HCl"].adds == {"Cl-": 1.0}
    assert reagents["CO2"].adds == {"carbonate": 1.0}
    assert strong_charge(reagents["Ca(OH)2"]) == 2.0
    assert strong_charge(reagents["Na2CO3"]) == 2.0  # proton excess −2 vs. CO2(aq), top charge 0
    assert strong_charge(reagents["HNO3"]) == -1.0
    assert strong_charge(reagents["H2SO4"]) == 0.0  # protons come with the sulfate total
    for r in reagents.values():
        if all(split_charge(s)[1] for s in r.adds):
            assert (strong_charge(r) > 0) == (r.kind == "base")


# --- densities ---------------------------------------------------------------------


def test_published_molarities(reagents: dict[str, Reagent]) -> None:
    # reference-data.md §8: CRC 20 °C [MEMORY, H] and the HCl table [READ]
    assert _molarity(reagents["NaOH"], 50.0) == pytest.approx(19.07, abs=0.01)
    assert _molarity(reagents["H2SO4"], 98.0) == pytest.approx(18.35, abs=0.01)
    assert _molarity(reagents["HCl"], 32.0) == pytest.approx(10.17, abs=0.01)
    assert _molarity(reagents["HCl"], 36.0) == pytest.approx(11.64, abs=0.01)
    # 25 % NaOH ≈ 1.274 kg/L, 7.96 mol/L [MEMORY, M], interpolated between 24 % and 28 %
    assert reagents["NaOH"].density_kg_l(25.0) == pytest.approx(1.274, abs=0.001)
    assert _molarity(reagents["NaOH"], 25.0) == pytest.approx(7.96, abs=0.01)
    # 93 % H2SO4 ≈ 1.828 kg/L, 17.3 mol/L [MEMORY, M]
    assert reagents["H2SO4"].density_kg_l(93.0) == pytest.approx(1.828, abs=0.001)
    assert _molarity(reagents["H2SO4"], 93.0) == pytest.approx(17.3, abs=0.05)
    # 68 % HNO3 about 15 mol/L (encyclopedia entry, [READ]: "approx. 15 molar")
    assert _molarity(reagents["HNO3"], 68.0) == pytest.approx(15.0, abs=0.25)


@pytest.mark.parametrize("name", ["NaOH", "KOH", "H2SO4", "HCl", "HNO3", "Ca(OH)2", "Mg(OH)2"])
def test_interpolation_is_monotone_between_table_points(reagents: dict[str, Reagent], name: str) -> None:
    r = reagents[name]
    for (p0, r0), (p1, r1) in zip(r.density_table, r.density_table[1:], strict=False):
        grid = np.linspace(p0, p1, 9)
        values = np.array([r.density_kg_l(float(p)) for p in grid])
        steps = np.diff(values)
        assert np.all(steps >= 0) or np.all(steps <= 0)
        assert values[0] == pytest.approx(r0) and values[-1] == pytest.approx(r1)
    # every table rises with strength over the commercial range (H2SO4 peaks near 98 %)
    rho = np.array([x for _, x in r.density_table])
    assert np.all(np.diff(rho) > 0)


def test_slurry_density_follows_volume_additivity(reagents: dict[str, Reagent], doc: dict[str, Any]) -> None:
    lime = reagents["Ca(OH)2"]
    rho_s = doc["reagent"]["Ca(OH)2"]["particle"]["density_kg_l"]
    rho_w = doc["water"]["density"]["kg_l"]
    w = 0.125
    expected = 1.0 / (w / rho_s + (1 - w) / rho_w)
    assert lime.density_kg_l(12.5) == pytest.approx(expected, rel=1e-5)
    assert lime.density_kg_l(1.0) > rho_w


@pytest.mark.parametrize(("name", "pct"), [("NaOH", 55.0), ("NaOH", 0.5), ("HCl", 40.0), ("H2SO4", 99.0),
                                           ("NaOH", float("nan"))])
def test_density_outside_the_table_is_refused(reagents: dict[str, Reagent], name: str, pct: float) -> None:
    with pytest.raises(InputError, match="density is known for"):
        reagents[name].density_kg_l(pct)


def test_density_temperature_band_and_mass_dosed_reagents(reagents: dict[str, Reagent]) -> None:
    naoh = reagents["NaOH"]
    assert naoh.density_kg_l(50.0, 20.0 + DENSITY_TEMPERATURE_BAND_C) == naoh.density_kg_l(50.0)
    with pytest.raises(InputError, match="tabulated at 20 °C"):
        naoh.density_kg_l(50.0, 60.0)
    for name in ("CO2", "Na2CO3"):
        with pytest.raises(InputError, match="dosed by mass"):
            reagents[name].density_kg_l(100.0)


# --- solubility ----------------------------------------------------------------------


def test_lime_solubility_is_retrograde_and_matches_bates(reagents: dict[str, Reagent]) -> None:
    lime = reagents["Ca(OH)2"]
    temps = np.arange(0.0, 101.0, 5.0)
    sol = np.array([lime.solubility_g_per_100g_h2o(float(t)) for t in temps])
    assert np.all(np.diff(sol) < 0)
    bates_mol_kg = 0.0203  # Bates, Bower & Smith 1956 [READ]
    ours_mol_kg = sol[temps == 25.0][0] * 10.0 / lime.molar_mass_g_mol
    assert ours_mol_kg == pytest.approx(bates_mol_kg, rel=0.07)
    with pytest.raises(InputError):
        lime.solubility_g_per_100g_h2o(120.0)
    assert reagents["NaOH"].solubility_g_per_100g_h2o(20.0) is None


def test_magnesium_hydroxide_solubility_derivation(reagents: dict[str, Reagent], doc: dict[str, Any]) -> None:
    ksp = doc["reagent"]["Mg(OH)2"]["ksp"]["value"]
    s_mol_kg = (ksp / 4.0) ** (1.0 / 3.0)
    expected = s_mol_kg * reagents["Mg(OH)2"].molar_mass_g_mol / 10.0
    assert reagents["Mg(OH)2"].solubility_g_per_100g_h2o(25.0) == pytest.approx(expected, rel=2e-3)


# --- product amounts -------------------------------------------------------------------


def test_same_dose_for_two_strengths_scales_by_mass_fraction_and_density(reagents: dict[str, Reagent]) -> None:
    naoh = reagents["NaOH"]
    a = product_amounts(2.0, naoh, 50.0, 20.0, 120.0)
    b = product_amounts(2.0, naoh, 25.0, 20.0, 120.0)
    assert a["dose_mg_l"] == b["dose_mg_l"] == pytest.approx(2.0 * naoh.molar_mass_g_mol)
    assert b["product_mg_l"] / a["product_mg_l"] == pytest.approx(50.0 / 25.0)
    ratio = (50.0 / 25.0) * naoh.density_kg_l(50.0) / naoh.density_kg_l(25.0)
    assert b["product_l_per_m3"] / a["product_l_per_m3"] == pytest.approx(ratio)
    # volume from molarity: L/m³ = dose [mol/m³] / molarity [mol/L]
    assert a["product_l_per_m3"] == pytest.approx(2.0 / _molarity(naoh, 50.0))
    assert a["product_l_h"] == pytest.approx(a["product_l_per_m3"] * 120.0)
    assert a["product_kg_h"] == pytest.approx(a["product_l_h"] * naoh.density_kg_l(50.0))


def test_acid_dose_from_published_molarity(reagents: dict[str, Reagent]) -> None:
    # 1.0 mmol/L HCl as 32 % (10.17 mol/L, HCl table [READ]) is 0.0983 L/m³
    out = product_amounts(1.0, reagents["HCl"], 32.0)
    assert out["product_l_per_m3"] == pytest.approx(1.0 / 10.17, rel=1e-3)
    assert out["product_l_h"] is None and out["product_kg_h"] is None


def test_slurry_solid_and_gas_amounts(reagents: dict[str, Reagent]) -> None:
    lime = reagents["Ca(OH)2"]
    out = product_amounts(1.0, lime, 10.0, flow_m3_h=100.0)
    dry = 1.0 * lime.molar_mass_g_mol / 0.93
    assert out["purity_pct_w"] == 93.0
    assert out["product_mg_l"] == pytest.approx(dry / 0.10)
    assert out["product_l_per_m3"] == pytest.approx(out["product_mg_l"] / 1000.0 / lime.density_kg_l(10.0))
    purer = product_amounts(1.0, lime, 10.0, purity_pct_w=100.0)
    assert purer["product_mg_l"] == pytest.approx(out["product_mg_l"] * 0.93)
    co2 = product_amounts(0.5, reagents["CO2"], flow_m3_h=200.0)
    assert co2["product_l_per_m3"] is None and co2["product_l_h"] is None
    assert co2["product_kg_h"] == pytest.approx(0.5 * 44.009 * 200.0 / 1000.0, rel=1e-4)
    ash = product_amounts(1.0, reagents["Na2CO3"], 99.0, flow_m3_h=10.0)
    assert ash["product_mg_l"] == pytest.approx(reagents["Na2CO3"].molar_mass_g_mol / 0.99)
    assert ash["product_l_per_m3"] is None


@pytest.mark.parametrize(
    ("name", "kwargs"),
    [
        ("NaOH", {"strength_pct_w": 60.0}),
        ("HCl", {"strength_pct_w": 0.1}),
        ("Ca(OH)2", {"strength_pct_w": 45.0}),
        ("CO2", {"strength_pct_w": 120.0}),
        ("NaOH", {"dose_mmol_l": -1.0}),
        ("NaOH", {"dose_mmol_l": math.inf}),
        ("NaOH", {"flow_m3_h": -5.0}),
        ("NaOH", {"purity_pct_w": 90.0}),
        ("Ca(OH)2", {"purity_pct_w": 0.0}),
    ],
)
def test_product_amounts_refuse_nonsense(reagents: dict[str, Reagent], name: str, kwargs: dict[str, float]) -> None:
    args: dict[str, Any] = {"dose_mmol_l": 1.0, **kwargs}
    with pytest.raises(InputError):
        product_amounts(reagent=reagents[name], **args)


# --- custom reagents and the public view ----------------------------------------------------


def test_custom_solution_reagent_behaves_like_the_catalogue() -> None:
    r = custom_reagent("caustic 30", {"Na+": 1}, "base", formula="NaOH", strength_pct_w=30.0,
                       density_kg_l=1.3279)
    assert r.custom and r.form == "solution" and r.molar_mass_g_mol == formula_mass_g_mol("NaOH")
    out = product_amounts(1.0, r)
    assert out["product_l_per_m3"] == pytest.approx(r.molar_mass_g_mol / 0.30 / 1000.0 / 1.3279)
    solid = custom_reagent("acid_k salt", {"Na+": 1, "acid_k": 1}, "base", molar_mass_g_mol=180.0,
                           strength_pct_w=95.0, known_systems={"acid_k"})
    assert solid.form == "solid" and product_amounts(1.0, solid)["product_l_per_m3"] is None


@pytest.mark.parametrize(
    "kwargs",
    [
        {"name": "NaOH"},  # built-in name
        {"name": ""},
        {"adds": {}},
        {"adds": {"Na+": -1}},
        {"adds": {"Na+": float("nan")}},
        {"adds": {"Na+": 1, "Cl-": 1}},  # neutral salt
        {"adds": {"Cl-": 1}},  # an acid declared as a base
        {"adds": {"Xx+": 1}},  # not an element
        {"adds": {"unobtainium": 1}},  # unknown system
        {"kind": "salt"},
        {"formula": None},  # neither formula nor molar mass
        {"molar_mass_g_mol": 40.0},  # both
        {"formula": "Nope3"},
        {"strength_pct_w": 0.0},
        {"strength_pct_w": 101.0},
        {"density_kg_l": 9.0},
    ],
)
def test_custom_reagent_validation(kwargs: dict[str, Any]) -> None:
    args: dict[str, Any] = {"name": "my base", "adds": {"Na+": 1}, "kind": "base", "formula": "NaOH",
                            "known_systems": {"carbonate"}, **kwargs}
    with pytest.raises(InputError):
        custom_reagent(**args)


def test_public_dict(reagents: dict[str, Reagent]) -> None:
    import json

    for r in reagents.values():
        d = r.as_public_dict()
        json.dumps(d)
        assert d["name"] == r.name and d["molar_mass_g_mol"] == r.molar_mass_g_mol
        assert d["default_strength_pct_w"] == r.default_strength_pct_w
        assert "IUPAC" in d["atomic_weights"]
        if r.form == "solution":
            assert d["default_molarity_mol_l"] == pytest.approx(_molarity(r, r.default_strength_pct_w))
        if r.form in ("solid", "gas"):
            assert d["default_density_kg_l"] is None
    assert any("add acid to water" in h.lower() for h in reagents["H2SO4"].hazards)
