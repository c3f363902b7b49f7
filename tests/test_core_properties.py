"""Properties of the core on many random, realistic streams (hypothesis).

Streams: 1–4 built-in systems (0.001–20 mmol/L each), 0–4 strong ions (0–20 mmol/L),
0–100 °C, any activity model.

Run length: 100 examples per property by default (CI). For a long run set the environment
variable ``HYPOTHESIS_PROFILE=long`` (1000 examples per property), e.g.

    HYPOTHESIS_PROFILE=long .venv/bin/python -m pytest tests/test_core_properties.py

The profiles are applied to the tests of this module only (no global ``load_profile``).
"""

from __future__ import annotations

import os

import periodictable
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from models.equilibrium import solve, solve_many
from models.results import EquilibriumResult
from models.stream import ACTIVITY_MODELS, Entry, StreamSpec
from models.thermo import load_database

settings.register_profile(
    "ci", max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow]
)
settings.register_profile(
    "long", max_examples=1000, deadline=None, suppress_health_check=[HealthCheck.too_slow]
)
PROFILE = settings.get_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci") if
                               os.environ.get("HYPOTHESIS_PROFILE") in ("ci", "long") else "ci")

DB = load_database()
SYSTEMS = ("carbonate", "phosphate", "ammonia", "acetate", "sulfate", "borate", "citrate",
           "formate", "sulfide", "fluoride", "silicate", "oxalate")
SYSTEMS = tuple(s for s in SYSTEMS if s in DB.systems)
STRONG = ("Na+", "K+", "Ca2+", "Mg2+", "Cl-", "NO3-")

amount_mmol = st.floats(min_value=1e-3, max_value=20.0, allow_nan=False)
strong_mmol = st.floats(min_value=0.0, max_value=20.0, allow_nan=False)


@st.composite
def streams(draw) -> StreamSpec:
    systems = draw(st.lists(st.sampled_from(SYSTEMS), min_size=1, max_size=4, unique=True))
    ions = draw(st.lists(st.sampled_from(STRONG), min_size=0, max_size=4, unique=True))
    entries = [Entry(s, draw(amount_mmol), "mmol/L") for s in systems]
    entries += [Entry(i, draw(strong_mmol), "mmol/L") for i in ions]
    return StreamSpec(
        tuple(entries),
        temperature_c=draw(st.floats(min_value=0.0, max_value=100.0)),
        activity_model=draw(st.sampled_from(ACTIVITY_MODELS)),
    )


def _with_extra(spec: StreamSpec, ion: str, mmol: float) -> StreamSpec:
    """The same stream with ``mmol`` mmol/L more of a strong ion."""
    entries, found = [], False
    for e in spec.composition:
        if e.name == ion:
            entries.append(Entry(ion, e.value + mmol, "mmol/L"))
            found = True
        else:
            entries.append(e)
    if not found:
        entries.append(Entry(ion, mmol, "mmol/L"))
    return StreamSpec(tuple(entries), temperature_c=spec.temperature_c,
                      activity_model=spec.activity_model)


def _solved(spec: StreamSpec) -> EquilibriumResult:
    res = solve(spec)
    assert isinstance(res, EquilibriumResult)
    return res


@PROFILE
@given(streams())
def test_fractions_of_every_system_sum_to_one(spec: StreamSpec) -> None:
    for system in _solved(spec).systems:
        assert sum(system.fractions.values()) == pytest.approx(1.0, abs=1e-12)
        assert all(0.0 <= f <= 1.0 for f in system.fractions.values())


@PROFILE
@given(streams())
def test_species_of_every_system_add_up_to_its_total(spec: StreamSpec) -> None:
    res = _solved(spec)
    by_name = {s.name: s.mol_l for s in res.species}
    given_mol_l = {e.name: e.value * 1e-3 for e in spec.composition}
    for system in res.systems:
        species = DB.systems[system.name].species
        assert sum(by_name[sp] for sp in species) == pytest.approx(
            given_mol_l[system.name], rel=1e-12
        )


@PROFILE
@given(streams())
def test_charge_balance_closes_to_1e_minus_12_of_the_largest_charge_term(spec: StreamSpec) -> None:
    # Recomputed from the reported species (Σ z·c), and as reported by the solver.
    res = _solved(spec)
    terms = [s.charge * s.mol_l for s in res.species]
    largest = max(abs(t) for t in terms)
    assert abs(sum(terms)) <= 1e-12 * largest
    assert abs(res.charge_balance_residual_mol_l) <= 1e-12 * largest


@PROFILE
@given(streams())
def test_buffer_capacity_is_positive(spec: StreamSpec) -> None:
    assert _solved(spec).buffer_capacity_mmol_l_per_ph > 0.0


@PROFILE
@given(streams(), st.floats(min_value=0.01, max_value=5.0))
def test_adding_sodium_hydroxide_raises_ph(spec: StreamSpec, mmol: float) -> None:
    # NaOH adds Na+ to the analysis (the OH− is the water's).
    assert _solved(_with_extra(spec, "Na+", mmol)).ph > _solved(spec).ph


@PROFILE
@given(streams(), st.floats(min_value=0.01, max_value=5.0))
def test_adding_hydrochloric_acid_lowers_ph(spec: StreamSpec, mmol: float) -> None:
    assert _solved(_with_extra(spec, "Cl-", mmol)).ph < _solved(spec).ph


@PROFILE
@given(st.lists(streams(), min_size=2, max_size=8))
def test_a_batch_gives_the_same_results_as_its_streams_one_by_one(specs: list[StreamSpec]) -> None:
    batch = solve_many(specs)
    for spec, res in zip(specs, batch):
        one = _solved(spec)
        assert isinstance(res, EquilibriumResult)
        # Streams of a batch do not interact: equal to round-off (padding a stream to the
        # batch's widest system changes summation order only). β with activity corrections is
        # a central difference (δ = 1e-4 pH) of base amounts converged in ionic strength to
        # 1e-11 relative: that tolerance over 2δ leaves ~1e-7 relative noise in β.
        assert res.ph == pytest.approx(one.ph, abs=1e-12)
        assert res.ionic_strength_mol_l == pytest.approx(one.ionic_strength_mol_l, rel=1e-12)
        assert res.buffer_capacity_mmol_l_per_ph == pytest.approx(
            one.buffer_capacity_mmol_l_per_ph, rel=1e-6
        )


def _mass_g_mol(formula: str) -> float:
    # Formula masses straight from the periodictable package (IUPAC atomic weights), not via
    # the project's models.masses.
    return float(periodictable.formula(formula).mass)


@PROFILE
@given(streams())
def test_mg_per_litre_and_mmol_per_litre_give_the_same_ph(spec: StreamSpec) -> None:
    # mg/L of a system is mg/L of its mass-basis formula (thermo.toml convention, one mole per
    # mole of system), mg/L of a strong ion is mg/L of the ion.
    entries = []
    for e in spec.composition:
        formula = DB.strong_ions[e.name].formula if e.name in DB.strong_ions else \
            DB.systems[e.name].mass_formula
        entries.append(Entry(e.name, e.value * _mass_g_mol(formula), "mg/L"))
    in_mg = StreamSpec(tuple(entries), temperature_c=spec.temperature_c,
                       activity_model=spec.activity_model)
    assert _solved(in_mg).ph == pytest.approx(_solved(spec).ph, abs=1e-9)
