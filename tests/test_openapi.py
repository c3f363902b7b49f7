"""The committed OpenAPI document: no drift, valid, readable for client generators."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from openapi_spec_validator import validate

from service.app import create_app
from service.openapi import dumps_openapi
from service.settings import Settings

DOCUMENT = Path(__file__).resolve().parents[1] / "openapi" / "openapi.json"


@pytest.fixture(scope="module")
def committed() -> dict[str, Any]:
    return json.loads(DOCUMENT.read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def generated() -> dict[str, Any]:
    return create_app(Settings()).openapi()


def test_no_drift_from_committed_document(committed: dict[str, Any], generated: dict[str, Any]) -> None:
    assert generated == committed, "openapi/openapi.json is stale: run `protolyte openapi`"
    assert DOCUMENT.read_text(encoding="utf-8") == dumps_openapi(generated)


def test_document_is_valid_openapi(committed: dict[str, Any]) -> None:
    validate(committed)


def test_operation_ids_are_explicit(committed: dict[str, Any]) -> None:
    ids = {
        (path, method): op["operationId"]
        for path, item in committed["paths"].items()
        for method, op in item.items()
    }
    assert ids[("/v1/equilibrium", "post")] == "solve_equilibrium"
    assert ids[("/v1/equilibrium/batch", "post")] == "solve_equilibrium_batch"
    assert ids[("/v1/systems", "get")] == "list_systems"
    assert ids[("/v1/reagents", "get")] == "list_reagents"
    assert ids[("/v1/dose", "post")] == "dose_to_setpoint"
    assert ids[("/v1/titration-curve", "post")] == "titration_curve"
    assert ids[("/v1/blend", "post")] == "blend_streams"
    assert len(set(ids.values())) == len(ids)


def test_errors_use_named_problem_schema(committed: dict[str, Any]) -> None:
    schemas = committed["components"]["schemas"]
    assert {"Problem", "FieldError"} <= schemas.keys()
    assert "HTTPValidationError" not in schemas and "ValidationError" not in schemas
    assert schemas["Problem"]["properties"]["errors"]["anyOf"][0]["items"]["$ref"] == "#/components/schemas/FieldError"
    for path, item in committed["paths"].items():
        for op in item.values():
            for status, response in op["responses"].items():
                if status.startswith(("4", "5")):
                    assert response["content"] == {
                        "application/problem+json": {"schema": {"$ref": "#/components/schemas/Problem"}}
                    }, (path, status)
                assert "X-Request-ID" in response["headers"]
            if op.get("requestBody"):
                assert {"400", "413", "415", "422"} <= op["responses"].keys()


def test_request_limits_are_in_the_schema(committed: dict[str, Any]) -> None:
    s = committed["components"]["schemas"]
    stream = s["Stream"]["properties"]
    assert stream["temperature_c"]["minimum"] == 0 and stream["temperature_c"]["maximum"] == 100
    assert stream["composition"]["maxItems"] == 40 and stream["composition"]["minItems"] == 1
    assert stream["custom_systems"]["maxItems"] == 8
    entry = s["CompositionEntry"]["properties"]
    assert entry["value"]["minimum"] == 0 and entry["value"]["maximum"] == 1e6
    from models.units import UNITS

    assert entry["unit"]["enum"] == list(UNITS)
    assert s["CompositionEntry"]["additionalProperties"] is False
    assert s["BatchRequest"]["properties"]["items"]["maxItems"] == 10_000
    pka = s["CustomSystem"]["properties"]["pka"]["items"]
    assert pka["minimum"] < pka["maximum"]


def test_schema_examples_validate_against_the_request_model(committed: dict[str, Any]) -> None:
    from service.schemas import Stream

    examples = committed["components"]["schemas"]["Stream"]["examples"]
    assert len(examples) >= 2
    for example in examples:
        Stream.model_validate(example)


def test_batch_cap_follows_settings() -> None:
    doc = create_app(Settings(batch_max_items=250)).openapi()
    assert doc["components"]["schemas"]["BatchRequest"]["properties"]["items"]["maxItems"] == 250
