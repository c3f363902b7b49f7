"""Unit conversion and formula masses, checked against pint and published values.

Independent references used here:
* IUPAC/CIAAW abridged standard atomic weights 2021 (Prohaska et al. 2022, Pure Appl.
  Chem. 94, 573) – the five-digit values below [MEMORY, H; they are the printed
  abridged values, e.g. N 14.007, Ca 40.078].
* Standard Methods 2320 (alkalinity): 1 meq/L = 50.04 mg/L as CaCO3
  (reference-data.md §6) [MEMORY, H].
* pint 0.25 for the dimensional algebra (mg ↔ mmol via the molar mass, meq via charge).
"""

from __future__ import annotations

import re

import numpy as np
import pint
import pytest

from models.errors import InputError
from models.masses import atom_count, atoms, formula_mass_g_mol, split_charge
from models.units import (
    CACO3_G_PER_EQ,
    UNIT_CONVENTIONS,
    UNITS,
    allowed_units,
    conversion_factor,
    is_per_kg,
    to_mol_per_l,
)

# IUPAC 2021 abridged standard atomic weights [g/mol] (see module docstring).
IUPAC_ABRIDGED = {
    "H": 1.0080, "C": 12.011, "N": 14.007, "O": 15.999, "Na": 22.990, "Mg": 24.305,
    "P": 30.974, "S": 32.06, "Cl": 35.45, "K": 39.098, "Ca": 40.078,
}

ureg = pint.UnitRegistry()
ureg.define("equivalent = [charge_amount] = eq")
Q = ureg.Quantity


def _hand_mass(counts: dict[str, int]) -> float:
    return sum(IUPAC_ABRIDGED[el] * n for el, n in counts.items())


# --- masses -----------------------------------------------------------------


@pytest.mark.parametrize(
    ("formula", "counts"),
    [
        ("CH3COOH", {"C": 2, "H": 4, "O": 2}),
        ("H3PO4", {"H": 3, "P": 1, "O": 4}),
        ("CO2", {"C": 1, "O": 2}),
        ("Ca(OH)2", {"Ca": 1, "O": 2, "H": 2}),
        ("Na2CO3", {"Na": 2, "C": 1, "O": 3}),
        ("NH3", {"N": 1, "H": 3}),
        ("SO4", {"S": 1, "O": 4}),
        ("NO3", {"N": 1, "O": 3}),
        ("CaCO3", {"Ca": 1, "C": 1, "O": 3}),
        ("H2SO4", {"H": 2, "S": 1, "O": 4}),
        ("KOH", {"K": 1, "O": 1, "H": 1}),
        ("HCl", {"H": 1, "Cl": 1}),
        ("Mg(OH)2", {"Mg": 1, "O": 2, "H": 2}),
    ],
)
def test_formula_mass_matches_iupac_abridged_weights(formula: str, counts: dict[str, int]) -> None:
    assert atoms(formula) == counts
    assert formula_mass_g_mol(formula) == pytest.approx(_hand_mass(counts), abs=1e-3)
    for element, n in counts.items():
        assert atom_count(formula, element) == n


def test_published_molar_masses() -> None:
    # N 14.007 and CaCO3 100.09 g/mol (IUPAC 2021 abridged) [MEMORY, H]
    assert formula_mass_g_mol("N") == pytest.approx(14.007, abs=5e-4)
    assert formula_mass_g_mol("CaCO3") == pytest.approx(100.09, abs=0.01)
    assert atom_count("SO4", "N") == 0


@pytest.mark.parametrize(
    ("name", "expected"),
    [
        ("Na+", ("Na", 1)), ("Ca2+", ("Ca", 2)), ("Mg2+", ("Mg", 2)), ("Cl-", ("Cl", -1)),
        ("NO3-", ("NO3", -1)), ("NH4+", ("NH4", 1)), ("Br-", ("Br", -1)),
        ("SO42-", ("SO4", -2)), ("SO4-2", ("SO4", -2)), ("SO4 2-", ("SO4", -2)),
        ("CO3-2", ("CO3", -2)), ("HCO3-", ("HCO3", -1)), ("PO43-", ("PO4", -3)),
        ("Fe3+", ("Fe", 3)), ("CO2", ("CO2", 0)),
    ],
)
def test_split_charge(name: str, expected: tuple[str, int]) -> None:
    assert split_charge(name) == expected


def test_ion_mass_ignores_the_charge() -> None:
    assert formula_mass_g_mol("NO3-") == formula_mass_g_mol("NO3")
    assert formula_mass_g_mol("Ca2+") == pytest.approx(IUPAC_ABRIDGED["Ca"])


@pytest.mark.parametrize("bad", ["", "xyz", "2H2O", "Ca((OH)2", "na", "Qq"])
def test_bad_formula_is_input_error(bad: str) -> None:
    with pytest.raises(InputError):
        formula_mass_g_mol(bad)


def test_bad_element_symbol_is_input_error() -> None:
    with pytest.raises(InputError):
        atom_count("SO4", "Zz")


# --- units: pint as the independent check -------------------------------------

AMMONIA = {"kind": "system", "formula": "NH3", "charge": 0, "as_atoms": {"N": 1}, "name": "ammonia"}
SULFATE = {"kind": "system", "formula": "H2SO4", "charge": 0, "as_atoms": {"S": 1}, "name": "sulfate"}
CARBONATE = {"kind": "system", "formula": "CO2", "charge": 0, "as_atoms": {"C": 1}, "name": "carbonate"}
ACETATE = {"kind": "system", "formula": "CH3COOH", "charge": 0, "as_atoms": {"C": 2}, "name": "acetate"}
PHOSPHATE = {"kind": "system", "formula": "H3PO4", "charge": 0, "as_atoms": {"P": 1}, "name": "phosphate"}
CA = {"kind": "strong_ion", "formula": "Ca", "charge": 2, "as_atoms": {}, "name": "Ca2+"}
NA = {"kind": "strong_ion", "formula": "Na", "charge": 1, "as_atoms": {}, "name": "Na+"}
NITRATE = {"kind": "strong_ion", "formula": "NO3", "charge": -1, "as_atoms": {"N": 1}, "name": "NO3-"}
ALK = {"kind": "alkalinity", "formula": "", "charge": 0, "as_atoms": {}, "name": "alkalinity"}


def _molar_mass(formula: str) -> pint.Quantity:
    return Q(formula_mass_g_mol(formula), "g/mol")


def _pint_mol_l(q: pint.Quantity) -> float:
    return float(q.to("mol/L").magnitude)


@pytest.mark.parametrize(
    ("value", "unit", "entity", "pint_amount"),
    [
        (2.0, "mmol/L", CARBONATE, lambda v: Q(v, "mmol/L")),
        (350.0, "umol/L", CARBONATE, lambda v: Q(v, "umol/L")),
        (0.01, "mol/L", NA, lambda v: Q(v, "mol/L")),
        (46.0, "mg/L", NA, lambda v: Q(v, "mg/L") / _molar_mass("Na")),
        (0.5, "g/L", SULFATE, lambda v: Q(v, "g/L") / _molar_mass("H2SO4")),
        (60.0, "mg/L", ACETATE, lambda v: Q(v, "mg/L") / _molar_mass("CH3COOH")),
        (28.0, "mg/L as N", AMMONIA, lambda v: Q(v, "mg/L") / _molar_mass("N")),
        (11.3, "mg/L as N", NITRATE, lambda v: Q(v, "mg/L") / _molar_mass("N")),
        (3.1, "mg/L as P", PHOSPHATE, lambda v: Q(v, "mg/L") / _molar_mass("P")),
        (24.0, "mg/L as C", ACETATE, lambda v: Q(v, "mg/L") / (2 * _molar_mass("C"))),
        (12.0, "mg/L as C", CARBONATE, lambda v: Q(v, "mg/L") / _molar_mass("C")),
        (32.0, "mg/L as S", SULFATE, lambda v: Q(v, "mg/L") / _molar_mass("S")),
        (4.0, "meq/L", CA, lambda v: Q(v, "meq/L") / Q(2, "eq/mol")),
        (1.5, "meq/L", NITRATE, lambda v: Q(v, "meq/L") / Q(1, "eq/mol")),
        (
            100.0, "mg/L as CaCO3", CA,
            lambda v: Q(v, "mg/L") / (_molar_mass("CaCO3") / Q(2, "eq/mol")) / Q(2, "eq/mol"),
        ),
        (
            23.0, "mg/L as CaCO3", NA,
            lambda v: Q(v, "mg/L") / (_molar_mass("CaCO3") / Q(2, "eq/mol")) / Q(1, "eq/mol"),
        ),
        (100.0, "mg/L as CaCO3", CARBONATE, lambda v: Q(v, "mg/L") / _molar_mass("CaCO3")),
        # alkalinity in eq/L, compared through pint's own meq → eq
        (2.0, "meq/L", ALK, lambda v: Q(v, "meq/L") / Q(1, "eq/mol")),
        (2.0, "mmol/L", ALK, lambda v: Q(v, "mmol/L")),
        (
            100.0, "mg/L as CaCO3", ALK,
            lambda v: Q(v, "mg/L") / (_molar_mass("CaCO3") / Q(2, "eq/mol")) / Q(1, "eq/mol"),
        ),
    ],
)
def test_factor_agrees_with_pint(value, unit, entity, pint_amount) -> None:  # type: ignore[no-untyped-def]
    ours = to_mol_per_l(value, unit, **entity)
    assert float(ours) == pytest.approx(_pint_mol_l(pint_amount(value)), rel=1e-12)


def test_per_kg_units() -> None:
    assert is_per_kg("mol/kg") and is_per_kg("mmol/kg")
    assert not any(is_per_kg(u) for u in UNITS if not u.endswith("/kg"))
    per_kg = to_mol_per_l(3.0, "mmol/kg", **NA)
    assert float(per_kg) == pytest.approx(Q(3.0, "mmol/kg").to("mol/kg").magnitude)


def test_published_equivalence_facts() -> None:
    # Standard Methods 2320 / reference-data.md §6: 1 meq/L = 50.04 mg/L as CaCO3
    assert CACO3_G_PER_EQ == pytest.approx(50.04, abs=0.005)
    one_meq = to_mol_per_l(1.0, "meq/L", **ALK)
    as_caco3 = to_mol_per_l(50.04, "mg/L as CaCO3", **ALK)
    assert float(as_caco3) == pytest.approx(float(one_meq), rel=2e-4)
    # 28 mg/L NH3-N is 2.0 mmol/L (N = 14.007 g/mol)
    assert float(to_mol_per_l(28.014, "mg/L as N", **AMMONIA)) == pytest.approx(2.0e-3, rel=1e-4)
    # 100 mg/L Ca hardness as CaCO3 is 1.0 mmol/L Ca (reference-data.md §7: 9.99e-4 M)
    assert float(to_mol_per_l(100.0, "mg/L as CaCO3", **CA)) == pytest.approx(9.99e-4, rel=1e-3)


def test_sulfate_as_n_is_refused_with_the_units_that_fit() -> None:
    with pytest.raises(InputError) as err:
        to_mol_per_l(1.0, "mg/L as N", **SULFATE)
    msg = err.value.message
    assert msg.startswith("sulfate cannot be given in mg/L as N; use ")
    assert "mg/L as S" in msg and "mg/L as P" not in msg.split("use ")[1]
    assert err.value.field == ""


@pytest.mark.parametrize(
    ("unit", "entity"),
    [
        ("meq/L", SULFATE),
        ("meq/L", CARBONATE),
        ("mg/L as CaCO3", AMMONIA),
        ("mg/L as CaCO3", SULFATE),
        ("mg/L", ALK),
        ("umol/L", ALK),
        ("mol/kg", ALK),
        ("mg/L as N", CA),
        ("mg/L as P", AMMONIA),
    ],
)
def test_units_that_do_not_fit_are_refused(unit: str, entity: dict[str, object]) -> None:
    with pytest.raises(InputError, match=re.escape(f"{entity['name']} cannot be given in {unit}")):
        to_mol_per_l(1.0, unit, **entity)  # type: ignore[arg-type]


@pytest.mark.parametrize("unit", ["ppm", "mM", "mg/l", "mmol", "", "mg/L as Ca"])
def test_unknown_units_are_refused(unit: str) -> None:
    with pytest.raises(InputError, match="is not a unit Protolyte accepts"):
        to_mol_per_l(1.0, unit, **NA)


def test_allowed_units_is_consistent_with_the_converter() -> None:
    for entity in (AMMONIA, SULFATE, CARBONATE, ACETATE, PHOSPHATE, CA, NA, NITRATE, ALK):
        fits = allowed_units(entity["kind"], entity["as_atoms"], entity["name"])  # type: ignore[arg-type]
        for unit in UNITS:
            if unit in fits:
                assert conversion_factor(unit, **entity) > 0  # type: ignore[arg-type]
            else:
                with pytest.raises(InputError):
                    conversion_factor(unit, **entity)  # type: ignore[arg-type]
    assert allowed_units("alkalinity", {}, "alkalinity") == ("meq/L", "mmol/L", "mg/L as CaCO3")


def test_every_unit_has_a_documented_convention() -> None:
    assert set(UNIT_CONVENTIONS) == set(UNITS)
    assert all(len(text) > 20 for text in UNIT_CONVENTIONS.values())


@pytest.mark.parametrize("shape", [(5,), (2, 3), (4, 1, 2)])
def test_arrays_and_scalars_give_identical_results(shape: tuple[int, ...]) -> None:
    rng = np.random.default_rng(7)
    values = rng.uniform(0.0, 500.0, size=shape)
    for unit, entity in [("mg/L as N", AMMONIA), ("mg/L as CaCO3", CA), ("mg/L", SULFATE),
                         ("mg/L as CaCO3", ALK), ("umol/L", CARBONATE)]:
        vec = to_mol_per_l(values, unit, **entity)  # type: ignore[arg-type]
        assert vec.shape == shape
        scalars = np.array([float(to_mol_per_l(float(v), unit, **entity)) for v in values.ravel()])  # type: ignore[arg-type]
        np.testing.assert_array_equal(vec.ravel(), scalars)
    assert to_mol_per_l(1.0, "mmol/L", **NA).shape == ()


def test_input_array_is_not_modified() -> None:
    values = np.array([1.0, 2.0])
    to_mol_per_l(values, "mmol/L", **NA)
    np.testing.assert_array_equal(values, [1.0, 2.0])
