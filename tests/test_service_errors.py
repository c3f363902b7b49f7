"""Every error type is an RFC 9457 problem with a pointer where a field is at fault."""

from __future__ import annotations

import time
from collections.abc import Iterator, Sequence
from typing import Any

import pytest
from fastapi.testclient import TestClient

from models import equilibrium, thermo
from models.results import EquilibriumResult, StreamFailure
from models.stream import StreamSpec
from service.core import Core
from service.state import SELF_TEST_STREAM

from conftest import AppFactory

PROBLEM = "application/problem+json"


def assert_problem(r: Any, status: int, slug: str) -> dict[str, Any]:
    assert r.status_code == status, r.text
    assert r.headers["content-type"] == PROBLEM
    body = r.json()
    assert body["status"] == status
    assert body["type"] == f"urn:protolyte:problem:{slug}"
    assert body["title"] and body["detail"]
    assert body["instance"] == r.headers["x-request-id"]
    assert "Traceback" not in r.text and "/site-packages/" not in r.text
    return body


def pointers(body: dict[str, Any]) -> list[str]:
    return [e["pointer"] for e in body.get("errors", [])]


def test_malformed_json_is_400(client: TestClient) -> None:
    r = client.post("/v1/equilibrium", content=b'{"composition": [', headers={"content-type": "application/json"})
    body = assert_problem(r, 400, "malformed-json")
    assert "not valid JSON" in body["detail"]


def test_wrong_content_type_is_415(client: TestClient, stream: dict[str, Any]) -> None:
    import json

    r = client.post("/v1/equilibrium", content=json.dumps(stream), headers={"content-type": "text/csv"})
    body = assert_problem(r, 415, "unsupported-media-type")
    assert "application/json" in body["detail"]


def test_missing_content_type_is_415(client: TestClient) -> None:
    r = client.post("/v1/equilibrium", content=b'{"composition": []}', headers={"content-type": ""})
    assert_problem(r, 415, "unsupported-media-type")


def test_unknown_path_is_404(client: TestClient) -> None:
    body = assert_problem(client.get("/v1/equilibrum"), 404, "not-found")
    assert "/v1/equilibrum" in body["detail"]


def test_trailing_slash_is_404_not_redirect(client: TestClient, stream: dict[str, Any]) -> None:
    assert_problem(client.post("/v1/equilibrium/", json=stream, follow_redirects=False), 404, "not-found")


def test_wrong_method_is_405_with_allow(client: TestClient) -> None:
    r = client.get("/v1/equilibrium")
    assert_problem(r, 405, "method-not-allowed")
    assert r.headers["allow"] == "POST"
    r = client.delete("/v1/systems")
    assert_problem(r, 405, "method-not-allowed")
    assert "GET" in r.headers["allow"]


def test_body_over_limit_is_413_by_content_length(make_client: AppFactory, stream: dict[str, Any]) -> None:
    c = make_client(body_limit_bytes=200)
    body = assert_problem(c.post("/v1/equilibrium", json=stream), 413, "content-too-large")
    assert "200 bytes" in body["detail"]


def test_body_over_limit_is_413_when_streamed(make_client: AppFactory) -> None:
    c = make_client(body_limit_bytes=1000)

    def chunks() -> Iterator[bytes]:  # no Content-Length: the middleware must count
        yield b'{"composition": ['
        for _ in range(100):
            yield b'{"name": "Na+", "value": 1.0, "unit": "mg/L"},'
        yield b"]}"

    r = c.post("/v1/equilibrium", content=chunks(), headers={"content-type": "application/json"})
    assert "content-length" not in r.request.headers
    assert_problem(r, 413, "content-too-large")


def test_batch_over_cap_is_422_naming_items(make_client: AppFactory, stream: dict[str, Any]) -> None:
    c = make_client(batch_max_items=2)
    body = assert_problem(c.post("/v1/equilibrium/batch", json={"items": [stream] * 3}), 422, "validation-error")
    assert "at most 2" in body["detail"] and "3 items" in body["detail"]
    assert pointers(body) == ["/items"]
    assert c.post("/v1/equilibrium/batch", json={"items": [stream] * 2}).status_code == 200


def test_empty_batch_is_422(client: TestClient) -> None:
    body = assert_problem(client.post("/v1/equilibrium/batch", json={"items": []}), 422, "validation-error")
    assert pointers(body) == ["/items"]


def test_schema_invalid_batch_item_names_its_index(client: TestClient, stream: dict[str, Any]) -> None:
    bad = {**stream, "temperature_c": 140.0}
    body = assert_problem(client.post("/v1/equilibrium/batch", json={"items": [stream, bad]}), 422, "validation-error")
    assert pointers(body) == ["/items/1/temperature_c"]


@pytest.mark.parametrize(
    ("mutate", "pointer"),
    [
        (lambda s: s["composition"][0].update(value=-1.0), "/composition/0/value"),
        (lambda s: s.update(temperature_c=101.0), "/temperature_c"),
        (lambda s: s.update(temperature_c=-0.5), "/temperature_c"),
        (lambda s: s["composition"][1].update(unit="ppm"), "/composition/1/unit"),
        (lambda s: s["composition"][2].update(value="58"), "/composition/2/value"),
        (lambda s: s["composition"][2].update(value=False), "/composition/2/value"),
        (lambda s: s.update(activity_model="pitzer"), "/activity_model"),
        (lambda s: s.update(composition=[]), "/composition"),
        (lambda s: s.update(colour="blue"), "/colour"),
        (lambda s: s["custom_systems"][0].pop("pka"), "/custom_systems/0/pka"),
        (lambda s: s["custom_systems"][0].update(pka=[30.0]), "/custom_systems/0/pka/0"),
        (lambda s: s["custom_systems"][0].update(pka=[5.6, 4.2]), "/custom_systems/0/pka"),
        (lambda s: s["custom_systems"][0].update(delta_h_kj_mol=[1.0]), "/custom_systems/0/delta_h_kj_mol"),
        (lambda s: s["composition"].append({"name": "K+", "value": 1.0, "unit": "mg/L"}), "/composition/8/name"),
        (lambda s: s.update(balance_on="Na+"), "/balance_on"),
        (lambda s: s.update(balance_on="K+", measured_ph=7.0), "/balance_on"),
        (lambda s: s.update(gas={"co2_partial_pressure_atm": -0.1}), "/gas/co2_partial_pressure_atm"),
        (lambda s: s.update(measured_ph=15.0), "/measured_ph"),
        (lambda s: s["composition"][0].update(name="Na +"), "/composition/0/name"),
    ],
)
def test_validation_errors_name_the_field(client: TestClient, stream: dict[str, Any], mutate: Any, pointer: str) -> None:
    mutate(stream)
    body = assert_problem(client.post("/v1/equilibrium", json=stream), 422, "validation-error")
    assert pointer in pointers(body)
    assert all(e["detail"] for e in body["errors"])


@pytest.mark.parametrize("token", [b"NaN", b"Infinity", b"-Infinity"])
def test_non_finite_json_numbers_are_422(client: TestClient, token: bytes) -> None:
    raw = b'{"composition": [{"name": "Na+", "value": ' + token + b', "unit": "mg/L"}]}'
    r = client.post("/v1/equilibrium", content=raw, headers={"content-type": "application/json"})
    body = assert_problem(r, 422, "validation-error")
    assert pointers(body) == ["/composition/0/value"]
    assert "finite" in body["errors"][0]["detail"]


@pytest.mark.parametrize("text", ["NaN", "inf"])
def test_non_finite_strings_are_422(client: TestClient, text: str) -> None:
    body = {"composition": [{"name": "Na+", "value": text, "unit": "mg/L"}]}
    assert pointers(assert_problem(client.post("/v1/equilibrium", json=body), 422, "validation-error")) == [
        "/composition/0/value"
    ]


def test_core_input_error_is_422_with_pointer(client: TestClient) -> None:
    body = {"composition": [{"name": "Na+", "value": 1.0, "unit": "mmol/L"},
                            {"name": "sulfate", "value": 96.0, "unit": "mg/L as N"}]}
    problem = assert_problem(client.post("/v1/equilibrium", json=body), 422, "input-error")
    assert pointers(problem) == ["/composition/1/unit"]


def test_unknown_species_is_422_with_pointer(client: TestClient) -> None:
    body = {"composition": [{"name": "unobtainium", "value": 1.0, "unit": "mmol/L"}]}
    problem = assert_problem(client.post("/v1/equilibrium", json=body), 422, "input-error")
    assert pointers(problem) == ["/composition/0/name"]
    assert "ph" not in problem


def test_defect_is_500_problem_without_internals(make_client: AppFactory, stream: dict[str, Any]) -> None:
    def broken(spec: StreamSpec) -> EquilibriumResult:
        if spec == SELF_TEST_STREAM:
            return equilibrium.solve(spec)
        raise RuntimeError("secret detail /srv/internal/path.py")

    def broken_many(specs: Sequence[StreamSpec]) -> list[EquilibriumResult | StreamFailure]:
        return [broken(s) for s in specs]  # the single route may coalesce into solve_many

    core = Core(solve=broken, solve_many=broken_many, load_database=thermo.load_database)
    c = make_client(core=core, raise_server_exceptions=False)
    r = c.post("/v1/equilibrium", json=stream, headers={"X-Request-ID": "defect-1"})
    body = assert_problem(r, 500, "internal-error")
    assert body["instance"] == "defect-1"
    assert "secret" not in r.text and "/srv/" not in r.text


def test_time_budget_is_503(make_client: AppFactory, stream: dict[str, Any]) -> None:
    def slow(specs: Sequence[StreamSpec]) -> list[EquilibriumResult | StreamFailure]:
        time.sleep(1.0)
        return equilibrium.solve_many(specs)

    core = Core(solve=equilibrium.solve, solve_many=slow, load_database=thermo.load_database)
    c = make_client(core=core, solve_time_budget_s=0.05)
    start = time.perf_counter()
    r = c.post("/v1/equilibrium/batch", json={"items": [stream]})
    assert time.perf_counter() - start < 0.9  # answered before the solve finished
    assert_problem(r, 503, "time-budget-exceeded")
    assert r.headers["retry-after"]


def test_failed_self_test_keeps_service_unready(make_client: AppFactory) -> None:
    def failing(spec: StreamSpec) -> EquilibriumResult:
        raise RuntimeError("self-test broke")

    core = Core(solve=failing, solve_many=equilibrium.solve_many, load_database=thermo.load_database)
    from fastapi.testclient import TestClient as TC

    from service.app import create_app
    from service.settings import Settings

    client = TC(create_app(Settings(), core))
    with pytest.raises(RuntimeError):
        client.__enter__()  # lifespan fails: the process must not report ready
    r = client.get("/readyz")
    assert r.status_code == 503
    r = client.post("/v1/equilibrium", json={"composition": [{"name": "Na+", "value": 1.0, "unit": "mmol/L"}]})
    assert_problem(r, 503, "not-ready")
