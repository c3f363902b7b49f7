"""The parse/assemble caches: keyed by exact definitions, bounded, never shared wrongly."""

from __future__ import annotations

import dataclasses

import pytest

from models import prepare
from models.equilibrium import solve_many
from models.errors import InputError
from models.prepare import parse_stream
from models.stream import CustomSystem, Entry, StreamSpec
from models.thermo import load_database


def _spec(cs: CustomSystem, value: float = 1.0, t: float = 25.0) -> StreamSpec:
    return StreamSpec((Entry(cs.name, value, "mmol/L"), Entry("Na+", 1.0, "mmol/L")),
                      temperature_c=t, custom_systems=(cs,))


def test_identical_custom_systems_share_one_record_and_different_ones_do_not() -> None:
    db = load_database()
    a = parse_stream(_spec(CustomSystem("x", (4.0, 9.0))), db).systems[0]
    b = parse_stream(_spec(CustomSystem("x", (4.0, 9.0)), value=2.0), db).systems[0]
    c = parse_stream(_spec(CustomSystem("x", (4.0, 9.5))), db).systems[0]
    d = parse_stream(_spec(CustomSystem("x", (4.0, 9.0), delta_h_kj_mol=(0.0, 0.0))), db).systems[0]
    assert a is b
    assert a is not c and c.steps[1].pka_25c == 9.5
    assert d is not a  # explicit ΔH is its own key (same numbers today)


def test_cached_record_equals_a_fresh_one() -> None:
    db = load_database()
    cs = CustomSystem("y", (2.0, 7.0), top_charge=1, delta_h_kj_mol=(3.0, -4.0))
    got = parse_stream(_spec(cs), db).systems[0]
    assert dataclasses.astuple(got) == dataclasses.astuple(
        db.custom_system(cs.name, cs.pka, cs.top_charge, cs.delta_h_kj_mol))


def test_signed_zero_and_bool_charge_are_not_confused_with_cached_entries() -> None:
    db = load_database()
    pos = parse_stream(_spec(CustomSystem("z", (0.0,))), db).systems[0]
    neg = parse_stream(_spec(CustomSystem("z", (-0.0,))), db).systems[0]
    assert pos is not neg and str(neg.steps[0].pka_25c) == "-0.0"
    parse_stream(_spec(CustomSystem("w", (4.0,), top_charge=1)), db)
    with pytest.raises(InputError) as err:
        parse_stream(_spec(CustomSystem("w", (4.0,), top_charge=True)), db)
    assert err.value.field == "/custom_systems/0/pka"


def test_errors_are_not_cached() -> None:
    db = load_database()
    bad = CustomSystem("v", (7.0, 4.0))
    for _ in range(2):
        with pytest.raises(InputError, match="strictly increasing"):
            parse_stream(_spec(bad), db)


def test_custom_system_cache_is_bounded(monkeypatch: pytest.MonkeyPatch) -> None:
    db = load_database()
    monkeypatch.setattr(prepare, "_CUSTOMS_MAX", 8)
    for k in range(50):
        parse_stream(_spec(CustomSystem("u", (4.0 + k * 0.01,))), db)
    assert len(prepare._per_db(prepare._CUSTOMS, db)) <= 8


def test_a_stream_gets_the_same_answer_alone_in_any_batch_and_in_any_order() -> None:
    db = load_database()
    shared = CustomSystem("x", (4.2, 5.6))
    specs = [
        _spec(shared, 0.4, 31.5),
        _spec(shared, 0.9, 10.0),
        _spec(CustomSystem("x", (4.2, 5.7)), 0.4, 31.5),
        StreamSpec((Entry("Na+", 2.0, "mmol/L"), Entry("Cl-", 1.0, "mmol/L"), Entry("carbonate", 1.0, "mmol/L"))),
        StreamSpec((Entry("Na+", 2.0, "mmol/L"), Entry("carbonate", 1.0, "mmol/L")), co2_partial_pressure_atm=0.01),
        StreamSpec((Entry("Na+", 2.0, "mmol/L"), Entry("Na+", 1.0, "mmol/L"))),  # a failure
    ]
    together = solve_many(specs, db)
    alone = [solve_many([s], db)[0] for s in specs]
    reverse = solve_many(specs[::-1], db)[::-1]
    assert repr(together) == repr(alone) == repr(reverse)


def test_temperature_caches_keep_only_small_temperature_sets() -> None:
    db = load_database()
    plain = (Entry("Na+", 2.0, "mmol/L"), Entry("carbonate", 1.0, "mmol/L"))
    many = [StreamSpec(plain, temperature_c=1.0 + 0.5 * k) for k in range(prepare._T_CACHE_MAX_TEMPS + 5)]
    before = (dict(prepare._CUM_PK), dict(prepare._WATER))
    solve_many(many, db)
    assert (prepare._CUM_PK, prepare._WATER) == before
