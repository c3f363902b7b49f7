"""Numerical edges of the core: extreme pH and pK, out-of-range roots, ionic strength beyond the
models, many systems, trace amounts, and non-convergence never returned as a result."""

from __future__ import annotations

import numpy as np
import pytest

from models import calibration, solver
from models.equilibrium import solve, solve_many
from models.errors import SolveError
from models.fractions import fractions_from_pka
from models.results import EquilibriumResult, StreamFailure
from models.stream import CustomSystem, Entry, StreamSpec
from models.thermo import load_database


def test_fractions_stay_finite_and_sum_to_one_from_ph_minus_1_to_15_with_a_pka_of_17() -> None:
    # Issue 2 §4 (sulfide pK2 ≈ 17–19, Migdisov et al. 2002): no overflow, no 0/0, sum 1.
    ph = np.linspace(-1.0, 15.0, 1601)
    for pka in ([6.98, 17.4], [-1.0, 7.0, 17.0], [2.0, 9.0, 17.0, 25.0]):
        f = fractions_from_pka(ph, pka)
        assert np.all(np.isfinite(f))
        assert np.all((f >= 0.0) & (f <= 1.0))
        assert np.max(np.abs(f.sum(axis=-1) - 1.0)) < 1e-14


def test_fraction_of_a_pk_17_base_is_tiny_but_resolved_at_ph_15() -> None:
    # log10(α2/α1) = pH − pK2 = −2 at pH 15 for pK2 17 (Henderson–Hasselbalch): not rounded to 0.
    f = fractions_from_pka(np.array([15.0]), [6.98, 17.0])[0]
    assert np.log10(f[2] / f[1]) == pytest.approx(-2.0, abs=1e-12)


def test_a_root_below_ph_minus_1_is_reported_never_clipped() -> None:
    # 12 mol/kg Cl− in an ideal solution needs m(H+) = 12 > 10 = m(H+) at pH −1.
    spec = StreamSpec((Entry("Cl-", 12.0, "mol/kg"),), activity_model="ideal")
    (res,) = solve_many([spec])
    assert isinstance(res, StreamFailure)
    assert (res.kind, res.reason) == ("solve", "ph_below_model_range")
    with pytest.raises(SolveError) as raised:
        solve(spec)
    assert raised.value.reason == "ph_below_model_range"


def test_a_root_above_ph_15_is_reported_never_clipped() -> None:
    # At 25 °C m(OH−) = 10^(15 − 13.995) ≈ 10 mol/kg at pH 15; 12 mol/kg Na+ needs more.
    (res,) = solve_many([StreamSpec((Entry("Na+", 12.0, "mol/kg"),), activity_model="ideal")])
    assert isinstance(res, StreamFailure) and res.reason == "ph_above_model_range"


def test_ionic_strength_above_3_mol_per_kg_with_davies_is_refused() -> None:
    (res,) = solve_many([StreamSpec((Entry("Na+", 4.0, "mol/kg"), Entry("Cl-", 4.0, "mol/kg")),
                                    activity_model="davies")])
    assert isinstance(res, StreamFailure)
    assert (res.kind, res.reason) == ("solve", "ionic_strength_out_of_range")


def test_ionic_strength_between_0_5_and_3_with_davies_warns() -> None:
    # Davies is used to about 0.5 mol/kg (issue 2 §3): a warning, not silence.
    res = solve(StreamSpec((Entry("Na+", 1.0, "mol/kg"), Entry("Cl-", 1.0, "mol/kg"),
                            Entry("acetate", 0.01, "mol/kg"))))
    assert any("validity" in w for w in res.warnings)


def test_twelve_systems_in_one_stream_converge() -> None:
    names = ["carbonate", "phosphate", "ammonia", "sulfide", "sulfate", "acetate", "propionate",
             "butyrate", "formate", "lactate", "citrate", "oxalate", "borate", "silicate",
             "fluoride", "nitrite", "sulfite", "hypochlorite", "cyanide"]
    names = [n for n in names if n in load_database().systems][:12]
    assert len(names) == 12
    entries = tuple(Entry(n, 1.0, "mmol/L") for n in names) + (Entry("Na+", 15.0, "mmol/L"),)
    for model in ("ideal", "davies", "extended_debye_huckel"):
        res = solve(StreamSpec(entries, activity_model=model))
        assert len(res.systems) == 12
        largest = max(abs(s.charge * s.mol_l) for s in res.species)
        assert abs(sum(s.charge * s.mol_l for s in res.species)) < 1e-12 * largest
        assert all(abs(sum(s.fractions.values()) - 1.0) < 1e-12 for s in res.systems)


@pytest.mark.parametrize("model", ["ideal", "davies"])
def test_nanomolar_totals_converge_to_a_slightly_acid_water(model: str) -> None:
    # 1e-9 mol/L each of acetic and formic acid (pKa 4.756 / 3.75) dissociate fully: 2e-9 mol/L
    # of protons, half of which raise [H+] and half neutralise OH− (h − Kw/h = 2e-9 around
    # √Kw = 1.0e-7): ΔpH ≈ 0.434 · 1e-9 / 1.0e-7 ≈ 0.0043 below neutral.
    water_ph = solve(StreamSpec((Entry("Na+", 0.0, "mol/L"),), activity_model=model)).ph
    res = solve(StreamSpec((Entry("acetate", 1e-9, "mol/L"), Entry("formate", 1e-9, "mol/L")),
                           activity_model=model))
    assert 0.0035 < water_ph - res.ph < 0.005
    assert sum(s.mol_l for s in res.species if s.name.startswith("CH3COO")) == pytest.approx(
        1e-9, rel=1e-9)


def test_a_custom_system_with_extreme_pka_solves() -> None:
    # Custom pKa allowed from −5 to 25: strong acid (pKa −5) + very weak (25) in one system.
    cs = CustomSystem("extreme", (-5.0, 25.0), 0, None)
    res = solve(StreamSpec((Entry("extreme", 1e-3, "mol/kg"),), activity_model="ideal",
                           custom_systems=(cs,)))
    assert res.ph == pytest.approx(3.0, abs=0.001)   # 1e-3 mol/kg of a fully dissociated H+


def test_newton_that_runs_out_of_iterations_is_never_returned(monkeypatch) -> None:
    monkeypatch.setattr(solver, "MAX_NEWTON", 2)
    spec = StreamSpec((Entry("carbonate", 2.0, "mmol/L"),), activity_model="ideal")
    (res,) = solve_many([spec])
    assert isinstance(res, StreamFailure) and res.reason == "not_converged"
    with pytest.raises(SolveError):
        solve(spec)


def test_ionic_strength_iteration_that_runs_out_is_never_returned(monkeypatch) -> None:
    # pH and ionic strength are iterated together: a cap below what Davies needs here.
    monkeypatch.setattr(solver, "MAX_NEWTON", 3)
    spec = StreamSpec((Entry("carbonate", 2.0, "mmol/L"), Entry("Na+", 50.0, "mmol/L")))
    (res,) = solve_many([spec])
    assert isinstance(res, StreamFailure) and res.reason == "not_converged"


def test_a_calibration_that_does_not_converge_is_never_returned(monkeypatch) -> None:
    monkeypatch.setattr(calibration, "MAX_OUTER", 1)
    spec = StreamSpec((Entry("carbonate", 2.0, "mmol/L"), Entry("Ca2+", 1.0, "mmol/L")),
                      measured_ph=7.5, balance_on="Na+")
    (res,) = solve_many([spec])
    assert not isinstance(res, EquilibriumResult)
    # A numerical failure for a valid input is a solve failure, not an input error (results.py:
    # kind "input" is InputError, "solve" is SolveError); before the fix it came back as
    # ("input", "calibration_impossible", field "/balance_on").
    assert isinstance(res, StreamFailure)
    assert (res.kind, res.reason) == ("solve", "not_converged")
    with pytest.raises(SolveError):
        solve(spec)
