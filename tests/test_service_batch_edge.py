"""The batch route's cheaper edge gives the same answers: to_spec's slot-filling records,
the summed finiteness check, and the collector paused per batch request."""

from __future__ import annotations

import copy
import dataclasses
import gc
import json
import math
import random
import struct
from dataclasses import replace
from typing import Any

import orjson
import pytest

from models.equilibrium import solve_many
from models.records import slot_builder
from models.results import EquilibriumResult
from models.stream import CustomSystem, Entry, StreamSpec
from service.checks import structural_errors
from service.convert import NonFiniteResult, response_dict, to_spec
from service.problems import make_problem, summarise
from service.routes_equilibrium import gc_paused, loads_like_json
from service.schemas import BatchItemError, BatchRequest, Stream
from tests.conftest import CREAMERY_STREAM


def _reference_to_spec(stream: Stream) -> StreamSpec:
    """``to_spec`` as it was (the dataclasses' own constructors)."""
    return StreamSpec(
        composition=tuple(Entry(e.name, float(e.value), e.unit) for e in stream.composition),
        temperature_c=float(stream.temperature_c),
        activity_model=stream.activity_model,
        custom_systems=tuple(
            CustomSystem(
                name=c.name,
                pka=tuple(float(p) for p in c.pka),
                top_charge=int(c.top_charge),
                delta_h_kj_mol=None if c.delta_h_kj_mol is None else tuple(float(h) for h in c.delta_h_kj_mol),
            )
            for c in stream.custom_systems
        ),
        co2_partial_pressure_atm=None if stream.gas is None else float(stream.gas.co2_partial_pressure_atm),
        measured_ph=None if stream.measured_ph is None else float(stream.measured_ph),
        balance_on=stream.balance_on,
    )


def _items() -> list[dict[str, Any]]:
    """A mixed batch: defaults, ints for floats, gas, calibration, ΔH, a duplicate name
    (fails validation alone), an impossible total (fails in the solver alone)."""
    base = copy.deepcopy(CREAMERY_STREAM)
    minimal = {"composition": [{"name": "Na+", "value": 2, "unit": "mmol/L"}, {"name": "Cl-", "value": 1, "unit": "mmol/L"}]}
    open_cal = {
        "temperature_c": 12,
        "activity_model": "extended_debye_huckel",
        "composition": [{"name": "Cl-", "value": 3.0, "unit": "mmol/L"}, {"name": "ammonia", "value": 1.0, "unit": "mmol/L"}],
        "gas": {"co2_partial_pressure_atm": 0.00042},
        "measured_ph": 7,
        "balance_on": "Na+",
    }
    with_dh = copy.deepcopy(base)
    with_dh["custom_systems"][0]["delta_h_kj_mol"] = [1.5, -2]
    with_dh["custom_systems"][0]["top_charge"] = 1
    ideal = dict(copy.deepcopy(base), activity_model="ideal", custom_systems=[], composition=base["composition"][:7])
    duplicate = copy.deepcopy(base)
    duplicate["composition"].append({"name": "Na+", "value": 1.0, "unit": "mg/L"})
    impossible = {"composition": [{"name": "Na+", "value": 1.0e6, "unit": "mmol/L"}]}
    return [base, minimal, open_cal, with_dh, duplicate, ideal, impossible, base]


@pytest.mark.parametrize("cls", [Entry, CustomSystem, StreamSpec])
def test_slot_builder_builds_the_class_record(cls: type) -> None:
    build = slot_builder(cls)
    values = [object() for _ in dataclasses.fields(cls)]
    got = build(*values)
    assert type(got) is cls and got == cls(*values)
    assert build(**{f.name: v for f, v in zip(dataclasses.fields(cls), values)}) == cls(*values)
    with pytest.raises(TypeError):  # every field, no defaults
        build(*values[:-1])
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(got, dataclasses.fields(cls)[0].name, 1)
    assert not hasattr(cls, "__post_init__")  # the builder would skip it


def test_to_spec_is_the_reference_on_a_mixed_batch() -> None:
    for stream in BatchRequest.model_validate({"items": _items()}, strict=True).items:
        got, want = to_spec(stream), _reference_to_spec(stream)
        assert got == want
        assert [type(x) for x in dataclasses.astuple(got)] == [type(x) for x in dataclasses.astuple(want)]
        assert all(type(e.value) is float for e in got.composition)


def _results() -> list[EquilibriumResult]:
    specs = [to_spec(s) for s in BatchRequest.model_validate({"items": _items()}, strict=True).items]
    return [r for r in solve_many(specs) if isinstance(r, EquilibriumResult)]


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf])
def test_every_checked_number_is_still_refused(bad: float) -> None:
    result = next(r for r in _results() if r.calcite_saturation_index is not None)
    a = result.alkalinity
    cases = [replace(result, **{k: bad}) for k in (
        "ph", "ionic_strength_mol_l", "buffer_capacity_mmol_l_per_ph", "charge_balance_residual_mol_l",
        "calcite_saturation_index", "langelier_index", "conductivity_estimate_us_cm")]
    cases += [replace(result, alkalinity=replace(a, **{k: bad})) for k in (
        "total_meq_l", "total_mg_l_as_caco3", "phenolphthalein_meq_l", "phenolphthalein_mg_l_as_caco3")]
    for k in ("mol_l", "activity", "activity_coefficient"):
        species = list(result.species)
        species[-1] = replace(species[-1], **{k: bad})
        cases.append(replace(result, species=tuple(species)))
    systems = list(result.systems)
    systems[0] = replace(systems[0], total_mol_l=bad)
    cases.append(replace(result, systems=tuple(systems)))
    systems[0] = replace(result.systems[0], fractions={**result.systems[0].fractions, "x": bad})
    cases.append(replace(result, systems=tuple(systems)))
    for case in cases:
        with pytest.raises(NonFiniteResult):
            response_dict(case, "9.9.9")


def test_huge_finite_numbers_are_not_refused() -> None:
    result = _results()[0]
    big = replace(result, ionic_strength_mol_l=1.7e308, buffer_capacity_mmol_l_per_ph=1.7e308)  # the sum overflows
    assert response_dict(big, "9.9.9")["ionic_strength_mol_l"] == 1.7e308
    assert response_dict(replace(result, calcite_saturation_index=None), "9.9.9")["calcite_saturation_index"] is None


def test_gc_paused_nests_and_restores() -> None:
    assert gc.isenabled()
    with gc_paused():
        assert not gc.isenabled()
        with gc_paused():
            assert not gc.isenabled()
        assert not gc.isenabled()
    assert gc.isenabled()
    gc.disable()
    try:
        with gc_paused():
            pass
        assert not gc.isenabled()  # left off by someone else: stays off
    finally:
        gc.enable()
    with pytest.raises(RuntimeError), gc_paused():
        raise RuntimeError
    assert gc.isenabled()


def test_batch_runs_with_the_collector_paused_and_answers_as_before(make_client, monkeypatch) -> None:
    client = make_client()
    import service.solving as solving

    seen: list[bool] = []
    original = solving.Solver.solve_many

    async def spy(self, specs):  # type: ignore[no-untyped-def]
        seen.append(gc.isenabled())
        return await original(self, specs)

    monkeypatch.setattr(solving.Solver, "solve_many", spy)
    items = _items()
    r = client.post("/v1/equilibrium/batch", json={"items": items})
    assert r.status_code == 200 and seen == [False] and gc.isenabled()

    # the same bytes as built item by item the way the route did before
    version = client.app.state.protolyte.version
    streams = BatchRequest.model_validate({"items": items}, strict=True).items
    expected: list[Any] = [None] * len(streams)
    to_solve = []
    for i, s in enumerate(streams):
        errors = structural_errors(s, prefix=f"/items/{i}")
        if errors:
            problem = make_problem(422, "validation-error", summarise(errors), errors=errors)
            expected[i] = BatchItemError(ok=False, error=problem).model_dump(mode="json")
        else:
            to_solve.append(i)
    for i, res in zip(to_solve, solve_many([_reference_to_spec(streams[i]) for i in to_solve])):  # one call, as the route
        # a core failure's problem is the route's, unchanged: taken from the answer
        expected[i] = {"ok": True, "result": response_dict(res, version)} if isinstance(res, EquilibriumResult) else r.json()["results"][i]
    failed = sum(not e["ok"] for e in expected)
    assert failed == 2 and not r.json()["results"][6]["ok"]
    assert r.json()["results"][6]["error"]["type"].startswith("urn:protolyte:problem:")
    assert r.content == orjson.dumps({"results": expected, "succeeded": len(items) - failed, "failed": failed})

    bad = client.post("/v1/equilibrium/batch", json={"items": [{"composition": "x"}]})  # schema error: whole request
    assert bad.status_code == 422 and gc.isenabled()


_JSON_CASES = [
    b'{"a":1,"a":2}', b"1e400", b"-1e400", b"1e-400", b"-0", b"-0.0", b"18446744073709551616",
    b"9223372036854775808", b"-9223372036854775809", b"123456789012345678901234567890",
    b'"\\ud800"', b'"\\ud83d\\ude00"', b"\xef\xbb\xbf{}", b" {} ", b"NaN", b"[Infinity, -Infinity]",
    b"[1.0e2, 1E2, 0.1, 5e-324, 2.2250738585072011e-308, 1.7976931348623159e308]",
    b'{"\\u0061": "\x7f"}', '{"é": "ü"}'.encode(), '{"a": [1, 2.5]}'.encode("utf-16"),
    b"0.12345678901234567890123", b'{"items": [{"value": 410.12345678901234}]}',
]


@pytest.mark.parametrize("body", _JSON_CASES)
def test_loads_like_json_is_json_loads(body: bytes) -> None:
    want = json.loads(body)
    got = loads_like_json(body)
    assert repr(got) == repr(want) and type(got) is type(want)


@pytest.mark.parametrize("body", [b"", b"{", b'{"a":1}x', b"\x00", b"\xff{}", b'"\x00"', b"[1,]"])
def test_loads_like_json_fails_like_json_loads(body: bytes) -> None:
    with pytest.raises(ValueError) as want:
        json.loads(body)
    with pytest.raises(ValueError) as got:
        loads_like_json(body)
    assert type(got.value) is type(want.value) and str(got.value) == str(want.value)


def test_loads_like_json_floats() -> None:
    rng = random.Random(6)
    texts = []
    for _ in range(20_000):
        x = struct.unpack("<d", rng.getrandbits(64).to_bytes(8, "little"))[0]
        if math.isfinite(x):
            texts += [repr(x), f"{x:.17g}", f"{x:.15e}", f"{rng.uniform(0, 1000):.3f}"]
    body = ("[" + ",".join(texts) + "]").encode()
    assert loads_like_json(body) == json.loads(body)


def test_batch_body_is_parsed_by_loads_like_json(make_client, monkeypatch) -> None:
    import service.routes_equilibrium as routes

    calls: list[int] = []

    def spy(body: bytes) -> Any:
        calls.append(len(body))
        return loads_like_json(body)

    monkeypatch.setattr(routes, "loads_like_json", spy)
    r = make_client().post("/v1/equilibrium/batch", json={"items": [CREAMERY_STREAM]})
    assert r.status_code == 200 and len(calls) == 1
