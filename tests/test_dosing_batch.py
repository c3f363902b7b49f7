"""A stream's dose plan and parse do not depend on the batch it came in, nor on what was
parsed before (the parse caches: unit factors, entry lookups, water density and
extrapolation warnings per temperature)."""

from __future__ import annotations

import math

import pytest

from models.dosing import DosePlan, plan_doses
from models.equilibrium import solve_many
from models.errors import InputError
from models.prepare import parse_stream
from models.reagents import load_reagents
from models.results import StreamFailure
from models.stream import CustomSystem, Entry, StreamSpec
from models.thermo import load_database

MIXED: list[StreamSpec] = [
    StreamSpec((Entry("Na+", 2.0, "mmol/L"), Entry("Cl-", 5.0, "mmol/L"), Entry("carbonate", 2.0, "mmol/L"))),
    StreamSpec((Entry("Cl-", 1.0, "mmol/L"),), temperature_c=5.0, activity_model="ideal"),
    StreamSpec(
        (Entry("Na+", 180.0, "mg/L"), Entry("Cl-", 2.0, "mmol/L"), Entry("ammonia", 14.0, "mg/L as N")),
        temperature_c=95.0,
        activity_model="extended_debye_huckel",
    ),
    StreamSpec((Entry("Cl-", 2.0, "mmol/L"), Entry("carbonate", 1.0, "mmol/L")), co2_partial_pressure_atm=4e-4),
    StreamSpec(
        (Entry("Na+", 1.0, "mmol/L"), Entry("whey_acid", 0.5, "mmol/L")),
        custom_systems=(CustomSystem("whey_acid", (4.2, 5.6)),),
    ),
    StreamSpec((Entry("Na+", 10.0, "mmol/L"), Entry("carbonate", 12.0, "mmol/L"))),  # alkaline
    StreamSpec((Entry("Na+", 1.0, "furlongs"),)),  # bad unit
]


def _same(a, b) -> None:
    assert type(a) is type(b)
    if isinstance(a, Exception):
        assert str(a) == str(b)
        return
    assert isinstance(a, DosePlan)
    for name in ("dose_mol_l", "initial_ph", "final_ph"):
        x, y = getattr(a, name), getattr(b, name)
        assert x == pytest.approx(y, rel=1e-9, abs=1e-12), name
    assert a.gain_ph_per_mol_l == pytest.approx(b.gain_ph_per_mol_l, rel=1e-6)
    assert a.reachable_ph == pytest.approx(b.reachable_ph, abs=1e-9)
    assert a.already_met == b.already_met
    assert a.warnings == b.warnings


@pytest.mark.parametrize("reagent", ["NaOH", "HCl", "NaHCO3", "CO2", "Ca(OH)2"])
@pytest.mark.parametrize("setpoint", [5.5, 8.5])
def test_each_plan_of_a_mixed_batch_is_the_plan_of_the_stream_alone(reagent: str, setpoint: float) -> None:
    r = load_reagents()[reagent]
    batch = plan_doses(MIXED, r, setpoint)
    assert len(batch) == len(MIXED)
    for spec, got in zip(MIXED, batch):
        _same(got, plan_doses([spec], r, setpoint)[0])


def test_a_bad_unit_fails_every_time_it_is_parsed() -> None:
    db = load_database()
    bad = StreamSpec((Entry("Na+", 1.0, "mmol/L"), Entry("Cl-", 1.0, "furlongs")))
    good = StreamSpec((Entry("Na+", 1.0, "mmol/L"), Entry("Cl-", 1.0, "mmol/L")))
    for _ in range(2):
        with pytest.raises(InputError) as err:
            parse_stream(bad, db)
        assert err.value.field == "/composition/1/unit"
        assert parse_stream(good, db).strong["Cl-"] > 0.0


@pytest.mark.parametrize("declared_first", [True, False])
def test_a_custom_system_name_is_not_remembered_for_other_streams(declared_first: bool) -> None:
    db = load_database()
    declared = StreamSpec(
        (Entry("whey_acid", 0.4, "mmol/L"),), custom_systems=(CustomSystem("whey_acid", (4.2,)),)
    )
    undeclared = StreamSpec((Entry("whey_acid", 0.4, "mmol/L"),))
    order = [declared, undeclared] if declared_first else [undeclared, declared]
    out = solve_many(order, db)
    bad = out[1] if declared_first else out[0]
    ok = out[0] if declared_first else out[1]
    assert isinstance(bad, StreamFailure) and bad.field == "/composition/0/name"
    assert not isinstance(ok, StreamFailure)


def test_extrapolation_warnings_follow_each_streams_temperature() -> None:
    db = load_database()
    comp = (Entry("carbonate", 1.0, "mmol/L"), Entry("phosphate", 0.1, "mmol/L"), Entry("ammonia", 0.1, "mmol/L"))
    by_t = {t: parse_stream(StreamSpec(comp, temperature_c=t), db).warnings for t in (0.0, 25.0, 100.0, 25.0, 0.0)}
    for t, warnings in by_t.items():
        expected = [
            f"{s.name}: pK{k + 1} is extrapolated beyond the temperature range of its fit"
            for s in (db.systems["carbonate"], db.systems["phosphate"], db.systems["ammonia"])
            for k in s.extrapolated_steps(t)
        ]
        assert warnings == expected
    assert by_t[25.0] == []


def test_amounts_per_litre_use_the_density_at_each_streams_temperature() -> None:
    db = load_database()
    from models import water

    for t in (4.0, 25.0, 80.0, 4.0):
        ps = parse_stream(StreamSpec((Entry("Na+", 1.0, "mmol/L"),), temperature_c=t), db)
        assert ps.strong["Na+"] == 1e-3 / float(water.density_kg_l(t))
        assert math.isclose(ps.density_kg_l, float(water.density_kg_l(t)))
