"""Calibration to a measured pH: ``balance_on`` closes the charge balance (issue 2 §8)."""

from __future__ import annotations

import pytest

from models.equilibrium import solve, solve_many
from models.errors import InputError
from models.results import StreamFailure
from models.stream import Entry, StreamSpec

ANALYSIS = (Entry("carbonate", 2.0, "mmol/L"), Entry("Ca2+", 1.0, "mmol/L"),
            Entry("Cl-", 0.5, "mmol/L"), Entry("phosphate", 0.1, "mmol/L"))


def _calibrated(ph: float, ion: str, model: str = "davies", entries=ANALYSIS) -> StreamSpec:
    return StreamSpec(entries, activity_model=model, measured_ph=ph, balance_on=ion)


@pytest.mark.parametrize("model", ["ideal", "davies", "extended_debye_huckel"])
@pytest.mark.parametrize("ph", [6.8, 7.5, 8.6])
def test_balancing_on_sodium_returns_exactly_the_measured_ph_with_closed_balance(ph, model):
    res = solve(_calibrated(ph, "Na+", model))
    assert res.ph == ph
    largest = max(abs(s.charge * s.mol_l) for s in res.species)
    assert abs(res.charge_balance_residual_mol_l) < 1e-12 * largest
    assert abs(sum(s.charge * s.mol_l for s in res.species)) < 1e-12 * largest
    assert res.calibration.balance_on == "Na+" and res.calibration.added_mol_l > 0


@pytest.mark.parametrize("model", ["ideal", "davies"])
def test_the_sodium_found_by_calibration_reproduces_the_measured_ph_in_a_plain_solve(model):
    # Put the found Na+ into the analysis and solve without measured_ph: the same pH back
    # (to the solver's 1e-9 convergence).
    measured = 7.5
    added = solve(_calibrated(measured, "Na+", model)).calibration.added_mol_l
    plain = StreamSpec(ANALYSIS + (Entry("Na+", added, "mol/L"),), activity_model=model)
    assert solve(plain).ph == pytest.approx(measured, abs=1e-9)


def test_balancing_on_chloride_closes_an_excess_of_cations() -> None:
    entries = (Entry("carbonate", 2.0, "mmol/L"), Entry("Ca2+", 2.0, "mmol/L"))
    res = solve(_calibrated(7.8, "Cl-", entries=entries))
    assert res.ph == 7.8
    assert res.calibration.added_mol_l > 0
    plain = StreamSpec(entries + (Entry("Cl-", res.calibration.added_mol_l, "mol/L"),))
    assert solve(plain).ph == pytest.approx(7.8, abs=1e-9)


def test_balancing_on_sodium_when_the_cations_are_already_in_excess_is_refused() -> None:
    # 2 meq/L Ca2+ against ≈ 2 meq/L of carbonate at pH 7.8: closing would need negative Na+.
    entries = (Entry("carbonate", 2.0, "mmol/L"), Entry("Ca2+", 2.0, "mmol/L"))
    (failure,) = solve_many([_calibrated(7.8, "Na+", entries=entries)])
    assert isinstance(failure, StreamFailure)
    assert (failure.kind, failure.field) == ("input", "/balance_on")
    with pytest.raises(InputError) as raised:
        solve(_calibrated(7.8, "Na+", entries=entries))
    assert raised.value.field == "/balance_on"


def test_a_refused_calibration_does_not_disturb_the_rest_of_its_batch() -> None:
    bad = _calibrated(7.8, "Na+", entries=(Entry("carbonate", 2.0, "mmol/L"),
                                          Entry("Ca2+", 2.0, "mmol/L")))
    good = _calibrated(7.5, "Na+")
    results = solve_many([bad, good, bad])
    assert isinstance(results[0], StreamFailure) and isinstance(results[2], StreamFailure)
    assert results[1].ph == 7.5
    assert results[1].calibration.added_mol_l == solve(good).calibration.added_mol_l
