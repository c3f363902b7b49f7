"""Properties of issue 7 not covered by ``tests/test_core_properties.py`` (hypothesis).

Already there, at the core: charge balance, species sums, fractions, β > 0, strong base and
acid, mg/L ≡ mmol/L, batch ≡ one by one; pH monotone in a dose is in
``tests/test_dosing_properties.py``. Added here:

* a blend of a stream with itself (any two flows) is the stream — core and ``/v1/blend``;
* ``/v1/equilibrium/batch`` answers each item exactly as ``/v1/equilibrium`` does;
* the same stream sent in mg/L and in mmol/L gets the same pH over HTTP.

Streams are the random realistic streams of ``tests/test_core_properties.py``, and so is the
run length: its ``ci`` / ``long`` profiles are reused (``HYPOTHESIS_PROFILE=long`` → 1000
examples per property), none is registered here. In CI the HTTP properties take 50.

    HYPOTHESIS_PROFILE=long .venv/bin/python -m pytest tests/test_service_properties.py
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import periodictable
import pytest
from fastapi.testclient import TestClient
from hypothesis import given, settings
from hypothesis import strategies as st

from models.blend import blend
from models.equilibrium import solve
from models.stream import Entry, StreamSpec
from service.app import create_app
from service.settings import Settings

from test_core_properties import DB, PROFILE, streams

#: The core profile, with fewer examples in CI for the HTTP round trips (long keeps ≥ 1000).
HTTP_PROFILE = settings(PROFILE, max_examples=PROFILE.max_examples if PROFILE.max_examples >= 1000 else 50)

flows = st.floats(min_value=1e-3, max_value=1e4, allow_nan=False)

_app = create_app(Settings())


@pytest.fixture(scope="module")
def client() -> Iterator[TestClient]:
    with TestClient(_app) as c:
        yield c


def as_json(spec: StreamSpec) -> dict[str, Any]:
    return {
        "temperature_c": spec.temperature_c,
        "activity_model": spec.activity_model,
        "composition": [{"name": e.name, "value": e.value, "unit": e.unit} for e in spec.composition],
    }


def _totals(res: Any) -> dict[str, float]:
    return {s.name: s.total_mol_l for s in res.systems}


@PROFILE
@given(streams(), flows, flows)
def test_a_blend_of_a_stream_with_itself_is_the_stream(spec: StreamSpec, q1: float, q2: float) -> None:
    alone = solve(spec)
    mixed = blend([(q1, spec), (q2, spec)])
    assert mixed.total_flow_m3_h == pytest.approx(q1 + q2, rel=1e-15)
    assert mixed.result.temperature_c == pytest.approx(spec.temperature_c, abs=1e-9)
    assert mixed.result.ph == pytest.approx(alone.ph, abs=1e-9)
    assert mixed.result.ionic_strength_mol_l == pytest.approx(alone.ionic_strength_mol_l, rel=1e-9)
    mine, theirs = _totals(mixed.result), _totals(alone)
    assert mine.keys() == theirs.keys()
    for name, total in theirs.items():
        assert mine[name] == pytest.approx(total, rel=1e-12), name


@pytest.mark.parametrize("temperature", [0.0, 100.0])
def test_a_blend_at_the_end_of_the_temperature_range_stays_in_it(temperature: float) -> None:
    # Found by the property above: (0.7·100 + 0.1·100)/0.8 = 100.00000000000001 °C was
    # refused as "the mixture does not solve: temperature must be between 0 and 100 °C".
    spec = StreamSpec((Entry("carbonate", 1.0, "mmol/L"),), temperature_c=temperature)
    mixed = blend([(0.7, spec), (0.1, spec)])
    assert mixed.result.temperature_c == temperature
    assert mixed.result.ph == pytest.approx(solve(spec).ph, abs=1e-9)


@HTTP_PROFILE
@given(streams(), flows, flows)
def test_blend_route_of_a_stream_with_itself_answers_the_stream(
    client: TestClient, spec: StreamSpec, q1: float, q2: float
) -> None:
    stream = as_json(spec)
    alone = client.post("/v1/equilibrium", json=stream).json()
    r = client.post("/v1/blend", json={"streams": [{"flow_m3_h": q1, "stream": stream},
                                                   {"flow_m3_h": q2, "stream": stream}]})
    assert r.status_code == 200, r.text
    mixed = r.json()["result"]
    assert mixed["ph"] == pytest.approx(alone["ph"], abs=1e-9)
    assert mixed["ionic_strength_mol_l"] == pytest.approx(alone["ionic_strength_mol_l"], rel=1e-9)


@HTTP_PROFILE
@given(st.lists(streams(), min_size=1, max_size=6))
def test_the_batch_route_answers_each_item_as_the_single_route_does(
    client: TestClient, specs: list[StreamSpec]
) -> None:
    items = [as_json(s) for s in specs]
    r = client.post("/v1/equilibrium/batch", json={"items": items})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["succeeded"] == len(items) and body["failed"] == 0
    for item, got in zip(items, body["results"]):
        one = client.post("/v1/equilibrium", json=item)
        assert one.status_code == 200, one.text
        single, batched = one.json(), got["result"]
        # Same fields, same species in the same order; numbers equal to round-off (see the
        # core property for why β gets 1e-6: a central difference of converged amounts).
        assert batched.keys() == single.keys()
        assert batched["ph"] == pytest.approx(single["ph"], abs=1e-12)
        assert batched["ionic_strength_mol_l"] == pytest.approx(single["ionic_strength_mol_l"], rel=1e-12)
        assert batched["buffer_capacity_mmol_l_per_ph"] == pytest.approx(
            single["buffer_capacity_mmol_l_per_ph"], rel=1e-6)
        assert [s["name"] for s in batched["species"]] == [s["name"] for s in single["species"]]
        for a, b in zip(batched["species"], single["species"]):
            assert a["mol_l"] == pytest.approx(b["mol_l"], rel=1e-9, abs=1e-300)
        assert batched["warnings"] == single["warnings"]


def _mass_g_mol(name: str) -> float:
    # Formula masses from the periodictable package (IUPAC atomic weights), independent of
    # the project's models.masses; the mass basis of a system is its thermo.toml mass_formula.
    formula = DB.strong_ions[name].formula if name in DB.strong_ions else DB.systems[name].mass_formula
    return float(periodictable.formula(formula).mass)


@HTTP_PROFILE
@given(streams())
def test_the_same_stream_in_mg_per_litre_and_mmol_per_litre_gets_the_same_ph(
    client: TestClient, spec: StreamSpec
) -> None:
    in_mmol = as_json(spec)
    in_mg = as_json(spec)
    for entry in in_mg["composition"]:
        entry["value"] = entry["value"] * _mass_g_mol(entry["name"])
        entry["unit"] = "mg/L"
    a = client.post("/v1/equilibrium", json=in_mmol)
    b = client.post("/v1/equilibrium", json=in_mg)
    assert a.status_code == b.status_code == 200, (a.text, b.text)
    assert b.json()["ph"] == pytest.approx(a.json()["ph"], abs=1e-9)
