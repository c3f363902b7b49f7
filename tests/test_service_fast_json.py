"""The routes' plain-dict responses are exactly the declared response models' JSON form."""

from __future__ import annotations

from typing import Any

import orjson
import pytest

from models.equilibrium import solve_many
from models.results import EquilibriumResult
from models.stream import CustomSystem, Entry, StreamSpec

from service.convert import NonFiniteResult, response_dict
from service.schemas import EquilibriumResponse

SPECS = [
    # plain closed stream
    StreamSpec((Entry("Na+", 2.0, "mmol/L"), Entry("Cl-", 1.0, "mmol/L"), Entry("carbonate", 1.0, "mmol/L"))),
    # calcite and Langelier defined, custom system, extended Debye–Hückel at 60 °C
    StreamSpec(
        (Entry("Ca2+", 1.5, "mmol/L"), Entry("Na+", 3.0, "mmol/L"), Entry("carbonate", 3.0, "mmol/L"),
         Entry("whey_acid", 0.4, "mmol/L")),
        temperature_c=60.0, activity_model="extended_debye_huckel",
        custom_systems=(CustomSystem("whey_acid", (4.2, 5.6)),),
    ),
    # open to CO2, calibrated on Na+ to a measured pH
    StreamSpec(
        (Entry("Cl-", 3.0, "mmol/L"), Entry("ammonia", 1.0, "mmol/L")),
        co2_partial_pressure_atm=0.00042, measured_ph=7.2, balance_on="Na+",
    ),
]


def _same_leaves(a: Any, b: Any, path: str = "") -> None:
    assert type(a) is type(b), f"{path}: {type(a).__name__} != {type(b).__name__}"
    if isinstance(a, dict):
        assert list(a) == list(b), path
        for k in a:
            _same_leaves(a[k], b[k], f"{path}/{k}")
    elif isinstance(a, list):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b)):
            _same_leaves(x, y, f"{path}/{i}")
    else:
        assert a == b, path


@pytest.mark.parametrize("spec", SPECS, ids=["closed", "calcite-custom-edh", "open-calibrated"])
def test_response_dict_is_the_models_json_form(spec: StreamSpec) -> None:
    (result,) = solve_many([spec])
    assert isinstance(result, EquilibriumResult)
    fast = response_dict(result, "9.9.9")
    model = EquilibriumResponse.model_validate(fast).model_dump(mode="json")
    _same_leaves(fast, model)
    _same_leaves(orjson.loads(orjson.dumps(fast)), model)  # and through the wire


def test_every_optional_part_is_exercised() -> None:
    results = [r for r in solve_many(SPECS) if isinstance(r, EquilibriumResult)]
    assert len(results) == len(SPECS)
    assert any(r.calibration is not None for r in results)
    assert any(r.calcite_saturation_index is not None for r in results)
    assert any(s.open_to_gas for r in results for s in r.systems)


def test_non_finite_result_is_refused() -> None:
    from dataclasses import replace

    (result,) = solve_many(SPECS[:1])
    assert isinstance(result, EquilibriumResult)
    with pytest.raises(NonFiniteResult):
        response_dict(replace(result, ph=float("nan")), "9.9.9")
