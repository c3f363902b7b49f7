"""The bad-input catalogue of issue 7: every input the service must refuse, one test each.

Each refusal is a 4xx ``application/problem+json`` with ``type``, ``title``, ``status`` and
``detail``; a field error names the field in ``errors[].pointer``; none is a 5xx, none
carries a result number (only problem members, see ``PROBLEM_MEMBERS``), and none shows a
stack trace or an internal path. Where the same input can reach several routes (a stream
inside a dose request, a batch item), the catalogue sends it there too.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from typing import Any

import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.settings import Settings

from conftest import AppFactory

PROBLEM = "application/problem+json"
#: Every member a problem may have; a result (``ph``, ``results``, ``dose_mmol_l``…) is none of them.
PROBLEM_MEMBERS = {"type", "title", "status", "detail", "instance", "errors", "reason",
                   "reachable_min_ph", "reachable_max_ph"}
LEAKS = ("Traceback", "/work/", ".py", "site-packages", 'File "')

NA = {"name": "Na+", "value": 2.0, "unit": "mmol/L"}
CARBONATE = {"name": "carbonate", "value": 2.0, "unit": "mmol/L"}


@pytest.fixture(scope="module")
def client() -> Iterator[TestClient]:
    """One default app for the whole catalogue (the service is stateless)."""
    with TestClient(create_app(Settings())) as c:
        yield c


def small_stream() -> dict[str, Any]:
    return {"composition": [dict(NA), dict(CARBONATE)]}


def refused(r: Any, status: int, slug: str, pointer: str | None = None) -> dict[str, Any]:
    """Assert ``r`` is the problem ``slug`` (naming ``pointer``, if given) and return its body."""
    assert r.status_code == status, r.text
    assert r.headers["content-type"] == PROBLEM
    body = r.json()
    assert set(body) <= PROBLEM_MEMBERS, f"not a bare problem: {sorted(set(body) - PROBLEM_MEMBERS)}"
    assert body["type"] == f"urn:protolyte:problem:{slug}"
    assert body["status"] == status
    assert body["title"].strip() and body["detail"].strip()
    for leak in LEAKS:
        assert leak not in r.text, leak
    if pointer is not None:
        pointers = [e["pointer"] for e in body.get("errors", [])]
        assert pointer in pointers, pointers
        assert all(e["detail"].strip() for e in body["errors"])
    return body


def post_raw(client: TestClient, path: str, text: str) -> Any:
    return client.post(path, content=text.encode(), headers={"content-type": "application/json"})


def with_token(template: dict[str, Any], token: str) -> str:
    """``template`` as JSON text with the string ``"@"`` replaced by the raw ``token``."""
    return json.dumps(template).replace('"@"', token)


#: (route, body with "@" where the bad value goes, pointer of that field)
NUMBER_FIELDS: list[tuple[str, dict[str, Any], str]] = [
    ("/v1/equilibrium", {"composition": [{"name": "Na+", "value": "@", "unit": "mg/L"}]},
     "/composition/0/value"),
    ("/v1/equilibrium", {"temperature_c": "@", "composition": [NA]}, "/temperature_c"),
    ("/v1/equilibrium", {"composition": [NA, {"name": "x", "value": 1.0, "unit": "mmol/L"}],
                         "custom_systems": [{"name": "x", "pka": [4.0, "@"]}]},
     "/custom_systems/0/pka/1"),
    ("/v1/equilibrium/batch", {"items": [small_stream(), {"measured_ph": "@", "balance_on": "Cl-",
                                                          "composition": [NA]}]},
     "/items/1/measured_ph"),
    ("/v1/dose", {"stream": small_stream(), "reagent": {"name": "HCl"}, "setpoint_ph": "@"},
     "/setpoint_ph"),
    ("/v1/titration-curve", {"stream": small_stream(), "reagent": {"name": "HCl"},
                             "max_dose_mmol_l": "@"}, "/max_dose_mmol_l"),
    ("/v1/blend", {"streams": [{"flow_m3_h": "@", "stream": small_stream()}]},
     "/streams/0/flow_m3_h"),
]
FIELD_IDS = [p for _, _, p in NUMBER_FIELDS]


# ------------------------------------------------------------------ non-finite numbers


@pytest.mark.parametrize(("path", "template", "pointer"), NUMBER_FIELDS, ids=FIELD_IDS)
def test_nan_as_a_json_number_is_refused_naming_the_field(
    client: TestClient, path: str, template: dict[str, Any], pointer: str
) -> None:
    body = refused(post_raw(client, path, with_token(template, "NaN")), 422, "validation-error", pointer)
    assert "finite" in body["detail"]


@pytest.mark.parametrize("token", ["Infinity", "-Infinity", "1e999"])
@pytest.mark.parametrize(("path", "template", "pointer"), NUMBER_FIELDS, ids=FIELD_IDS)
def test_infinity_as_a_json_number_is_refused_naming_the_field(
    client: TestClient, path: str, template: dict[str, Any], pointer: str, token: str
) -> None:
    # 1e999 is a legal JSON number that overflows a double to infinity on parsing.
    body = refused(post_raw(client, path, with_token(template, token)), 422, "validation-error", pointer)
    assert "finite" in body["detail"]


@pytest.mark.parametrize("text", ["NaN", "Infinity", "-Infinity", "inf"])
@pytest.mark.parametrize(("path", "template", "pointer"), NUMBER_FIELDS, ids=FIELD_IDS)
def test_nan_and_infinity_as_strings_are_refused_naming_the_field(
    client: TestClient, path: str, template: dict[str, Any], pointer: str, text: str
) -> None:
    refused(post_raw(client, path, with_token(template, json.dumps(text))), 422, "validation-error", pointer)


# ------------------------------------------------------------------ physical limits


def test_negative_concentration_is_refused(client: TestClient) -> None:
    stream = small_stream()
    stream["composition"][1]["value"] = -0.1
    body = refused(client.post("/v1/equilibrium", json=stream), 422, "validation-error",
                   "/composition/1/value")
    assert "greater than or equal to 0" in body["errors"][0]["detail"]


@pytest.mark.parametrize("temperature", [-0.01, 100.01, -273.15, 374.0])
def test_temperature_out_of_range_is_refused(client: TestClient, temperature: float) -> None:
    refused(client.post("/v1/equilibrium", json={**small_stream(), "temperature_c": temperature}),
            422, "validation-error", "/temperature_c")


def test_temperature_out_of_range_in_a_dosed_stream_names_the_stream_field(client: TestClient) -> None:
    req = {"stream": {**small_stream(), "temperature_c": 120.0}, "reagent": {"name": "NaOH"},
           "setpoint_ph": 9.0}
    refused(client.post("/v1/dose", json=req), 422, "validation-error", "/stream/temperature_c")


# ------------------------------------------------------------------ what the analysis names


def test_unknown_species_is_refused(client: TestClient) -> None:
    stream = {"composition": [NA, {"name": "kryptonate", "value": 1.0, "unit": "mmol/L"}]}
    body = refused(client.post("/v1/equilibrium", json=stream), 422, "input-error", "/composition/1/name")
    assert "kryptonate" in body["detail"]


def test_unknown_species_in_a_batch_fails_that_item_alone_without_a_number(client: TestClient) -> None:
    bad = {"composition": [{"name": "kryptonate", "value": 1.0, "unit": "mmol/L"}]}
    r = client.post("/v1/equilibrium/batch", json={"items": [small_stream(), bad]})
    assert r.status_code == 200
    ok, failed = r.json()["results"]
    assert ok["ok"] is True and isinstance(ok["result"]["ph"], float)
    assert failed["ok"] is False and set(failed) == {"ok", "error"}
    assert set(failed["error"]) <= PROBLEM_MEMBERS
    assert [e["pointer"] for e in failed["error"]["errors"]] == ["/items/1/composition/0/name"]


def test_the_same_species_twice_is_refused(client: TestClient) -> None:
    stream = {"composition": [NA, CARBONATE, {"name": "Na+", "value": 46.0, "unit": "mg/L"}]}
    body = refused(client.post("/v1/equilibrium", json=stream), 422, "validation-error",
                   "/composition/2/name")
    assert "/composition/0" in body["errors"][0]["detail"]


def test_the_same_species_twice_in_a_blend_part_names_the_part(client: TestClient) -> None:
    part = {"flow_m3_h": 3.0, "stream": {"composition": [CARBONATE, CARBONATE]}}
    refused(client.post("/v1/blend", json={"streams": [{"flow_m3_h": 1.0, "stream": small_stream()}, part]}),
            422, "validation-error", "/streams/1/stream/composition/1/name")


def test_a_custom_system_without_pka_is_refused(client: TestClient) -> None:
    stream = {"composition": [NA, {"name": "whey_acid", "value": 0.4, "unit": "mmol/L"}],
              "custom_systems": [{"name": "whey_acid", "top_charge": 0}]}
    body = refused(client.post("/v1/equilibrium", json=stream), 422, "validation-error",
                   "/custom_systems/0/pka")
    assert body["errors"][0]["code"] == "missing"


def test_a_custom_system_with_an_empty_pka_list_is_refused(client: TestClient) -> None:
    stream = {"composition": [NA, {"name": "whey_acid", "value": 0.4, "unit": "mmol/L"}],
              "custom_systems": [{"name": "whey_acid", "pka": []}]}
    refused(client.post("/v1/equilibrium", json=stream), 422, "validation-error", "/custom_systems/0/pka")


@pytest.mark.parametrize("pka", [[5.6, 4.2], [4.2, 4.2], [2.0, 9.0, 7.0]])
def test_a_custom_system_with_pka_out_of_order_is_refused(client: TestClient, pka: list[float]) -> None:
    stream = {"composition": [NA, {"name": "whey_acid", "value": 0.4, "unit": "mmol/L"}],
              "custom_systems": [{"name": "whey_acid", "pka": pka}]}
    body = refused(client.post("/v1/equilibrium", json=stream), 422, "validation-error",
                   "/custom_systems/0/pka")
    assert "increasing" in body["errors"][0]["detail"]


def test_a_unit_that_does_not_fit_the_species_is_refused(client: TestClient) -> None:
    # sulfate contains no nitrogen: "mg/L as N" means nothing for it
    stream = {"composition": [NA, {"name": "sulfate", "value": 96.0, "unit": "mg/L as N"}]}
    body = refused(client.post("/v1/equilibrium", json=stream), 422, "input-error", "/composition/1/unit")
    assert "sulfate" in body["detail"]


def test_a_unit_outside_the_enumeration_is_refused(client: TestClient) -> None:
    stream = {"composition": [{"name": "Na+", "value": 46.0, "unit": "ppm"}]}
    refused(client.post("/v1/equilibrium", json=stream), 422, "validation-error", "/composition/0/unit")


# ------------------------------------------------------------------ types and shape


@pytest.mark.parametrize(("path", "template", "pointer"), NUMBER_FIELDS, ids=FIELD_IDS)
def test_a_string_for_a_number_is_refused(
    client: TestClient, path: str, template: dict[str, Any], pointer: str
) -> None:
    refused(post_raw(client, path, with_token(template, '"7.5"')), 422, "validation-error", pointer)


@pytest.mark.parametrize("token", ["true", "false"])
@pytest.mark.parametrize(("path", "template", "pointer"), NUMBER_FIELDS, ids=FIELD_IDS)
def test_a_bool_for_a_number_is_refused(
    client: TestClient, path: str, template: dict[str, Any], pointer: str, token: str
) -> None:
    # lax parsing would read false as 0.0 and true as 1.0: a silently wrong number
    refused(post_raw(client, path, with_token(template, token)), 422, "validation-error", pointer)


@pytest.mark.parametrize("token", ["null", "[1.0]", '{"value": 1.0}'])
def test_null_a_list_or_an_object_for_a_number_is_refused(client: TestClient, token: str) -> None:
    text = with_token({"composition": [{"name": "Na+", "value": "@", "unit": "mg/L"}]}, token)
    refused(post_raw(client, "/v1/equilibrium", text), 422, "validation-error", "/composition/0/value")


def test_a_number_for_a_name_is_refused(client: TestClient) -> None:
    stream = {"composition": [{"name": 11, "value": 1.0, "unit": "mmol/L"}]}
    refused(client.post("/v1/equilibrium", json=stream), 422, "validation-error", "/composition/0/name")


def test_a_fractional_number_of_points_is_refused(client: TestClient) -> None:
    req = {"stream": small_stream(), "reagent": {"name": "HCl"}, "max_dose_mmol_l": 2.0, "points": 10.5}
    refused(client.post("/v1/titration-curve", json=req), 422, "validation-error", "/points")


@pytest.mark.parametrize("body", [[], [small_stream()], "stream", 7, None], ids=repr)
def test_a_body_that_is_not_an_object_is_refused(client: TestClient, body: Any) -> None:
    refused(post_raw(client, "/v1/equilibrium", json.dumps(body)), 422, "validation-error", "")


def test_an_empty_composition_is_refused(client: TestClient) -> None:
    refused(client.post("/v1/equilibrium", json={"composition": []}), 422, "validation-error", "/composition")


def test_a_missing_composition_is_refused(client: TestClient) -> None:
    body = refused(client.post("/v1/equilibrium", json={"temperature_c": 20.0}), 422, "validation-error",
                   "/composition")
    assert body["errors"][0]["code"] == "missing"


def test_an_empty_composition_in_a_batch_item_names_the_item(client: TestClient) -> None:
    r = client.post("/v1/equilibrium/batch", json={"items": [small_stream(), {"composition": []}]})
    refused(r, 422, "validation-error", "/items/1/composition")


# ------------------------------------------------------------------ size limits


def test_a_batch_over_the_cap_is_refused_before_any_solve(make_client: AppFactory) -> None:
    c = make_client(batch_max_items=3)
    body = refused(c.post("/v1/equilibrium/batch", json={"items": [small_stream()] * 4}), 422,
                   "validation-error", "/items")
    assert "at most 3" in body["detail"]
    exposition = c.get("/metrics").text
    assert "protolyte_batch_size_count 0.0" in exposition
    assert "protolyte_streams_solved_total 0.0" in exposition


def test_a_body_over_the_limit_with_content_length_is_refused(make_client: AppFactory) -> None:
    c = make_client(body_limit_bytes=512)
    batch = {"items": [small_stream()] * 10}
    r = c.post("/v1/equilibrium/batch", json=batch)
    assert int(r.request.headers["content-length"]) > 512
    body = refused(r, 413, "content-too-large")
    assert "512 bytes" in body["detail"]


def test_a_chunked_body_over_the_limit_without_content_length_is_refused(make_client: AppFactory) -> None:
    c = make_client(body_limit_bytes=512)

    def chunks() -> Iterator[bytes]:
        yield b'{"items": ['
        for i in range(20):
            yield (b"," if i else b"") + json.dumps(small_stream()).encode()
        yield b"]}"

    r = c.post("/v1/equilibrium/batch", content=chunks(), headers={"content-type": "application/json"})
    assert "content-length" not in r.request.headers
    assert r.request.headers["transfer-encoding"] == "chunked"
    refused(r, 413, "content-too-large")


def test_a_body_just_under_the_limit_is_served(make_client: AppFactory) -> None:
    text = json.dumps(small_stream())
    c = make_client(body_limit_bytes=len(text))
    assert post_raw(c, "/v1/equilibrium", text).status_code == 200


# ------------------------------------------------------------------ encoding


@pytest.mark.parametrize(
    "text",
    ['{"composition": [', "{'composition': []}", '{"composition": [] } trailing',
     '{"composition": [{"name": "Na+", "value": 01, "unit": "mg/L"}]}', "{" * 100_000],
    ids=["truncated", "single-quotes", "trailing-text", "leading-zero", "nested-100000-deep"],
)
def test_malformed_json_is_refused(client: TestClient, text: str) -> None:
    body = refused(post_raw(client, "/v1/equilibrium", text), 400, "malformed-json")
    assert "JSON" in body["detail"]


def test_an_empty_body_is_refused_as_a_missing_body(client: TestClient) -> None:
    body = refused(post_raw(client, "/v1/equilibrium", ""), 422, "validation-error", "")
    assert body["errors"][0]["code"] == "missing"


def test_a_body_that_is_not_utf8_is_refused(client: TestClient) -> None:
    r = client.post("/v1/equilibrium", content=b'{"composition": [\xff\xfe]}',
                    headers={"content-type": "application/json"})
    refused(r, 400, "malformed-json")


@pytest.mark.parametrize("content_type", ["text/plain", "application/x-www-form-urlencoded",
                                          "multipart/form-data; boundary=x", "application/xml", None])
@pytest.mark.parametrize("path", ["/v1/equilibrium", "/v1/equilibrium/batch", "/v1/dose",
                                  "/v1/titration-curve", "/v1/blend"])
def test_a_wrong_content_type_is_refused(client: TestClient, path: str, content_type: str | None) -> None:
    headers = {"content-type": content_type} if content_type else {"content-type": ""}
    r = client.post(path, content=json.dumps(small_stream()).encode(), headers=headers)
    body = refused(r, 415, "unsupported-media-type")
    assert "application/json" in body["detail"]


# ------------------------------------------------------------------ beyond any model


@pytest.mark.parametrize("model", ["ideal", "davies", "extended_debye_huckel"])
def test_an_ionic_strength_far_beyond_any_model_is_refused_with_its_reason(
    client: TestClient, model: str
) -> None:
    brine = {"activity_model": model, "composition": [{"name": "Na+", "value": 5.0, "unit": "mol/L"},
                                                      {"name": "Cl-", "value": 5.0, "unit": "mol/L"}]}
    body = refused(client.post("/v1/equilibrium", json=brine), 422, "solve-failed")
    assert body["reason"] == "ionic_strength_out_of_range"
    assert "ionic strength" in body["detail"]


def test_an_ionic_strength_beyond_any_model_fails_its_batch_item_alone(client: TestClient) -> None:
    brine = {"composition": [{"name": "Na+", "value": 5.0, "unit": "mol/L"},
                             {"name": "Cl-", "value": 5.0, "unit": "mol/L"}]}
    r = client.post("/v1/equilibrium/batch", json={"items": [brine, small_stream()]})
    assert r.status_code == 200
    failed, ok = r.json()["results"]
    assert failed == {"ok": False, "error": failed["error"]}
    assert failed["error"]["type"] == "urn:protolyte:problem:solve-failed"
    assert failed["error"]["reason"] == "ionic_strength_out_of_range"
    assert ok["ok"] is True


def test_a_brine_beyond_any_model_is_refused_as_a_dose_stream(client: TestClient) -> None:
    brine = {"composition": [{"name": "Na+", "value": 5.0, "unit": "mol/L"},
                             {"name": "Cl-", "value": 5.0, "unit": "mol/L"}]}
    req = {"stream": brine, "reagent": {"name": "HCl"}, "setpoint_ph": 6.0}
    body = refused(client.post("/v1/dose", json=req), 422, "solve-failed")
    # was "the stream itself does not solve: 4", reason "stream_not_solvable" (a raw status code)
    assert body["reason"] == "ionic_strength_out_of_range"
    assert "ionic strength exceeds 3 mol/kg" in body["detail"]


# ------------------------------------------------------------------ dosing


@pytest.mark.parametrize(("reagent", "setpoint"), [("NaOH", 3.0), ("HCl", 13.5)])
def test_an_unreachable_setpoint_is_refused_with_the_reachable_range(
    client: TestClient, reagent: str, setpoint: float
) -> None:
    req = {"stream": small_stream(), "reagent": {"name": reagent}, "setpoint_ph": setpoint}
    body = refused(client.post("/v1/dose", json=req), 422, "unreachable-setpoint")
    lo, hi = body["reachable_min_ph"], body["reachable_max_ph"]
    assert lo <= hi and not lo <= setpoint <= hi


def test_an_unknown_reagent_is_refused_naming_it(client: TestClient) -> None:
    req = {"stream": small_stream(), "reagent": {"name": "Unobtainium"}, "setpoint_ph": 7.0}
    r = client.post("/v1/dose", json=req)
    body = refused(r, 422, r.json().get("type", "").rsplit(":", 1)[-1])
    assert "Unobtainium" in body["detail"]
    assert "/reagent/name" in [e["pointer"] for e in body.get("errors", [])]


# ------------------------------------------------------------------ every route: 404 and 405

POST_ROUTES = ["/v1/equilibrium", "/v1/equilibrium/batch", "/v1/dose", "/v1/titration-curve", "/v1/blend"]
GET_ROUTES = ["/v1/systems", "/v1/reagents", "/healthz", "/readyz", "/metrics"]


@pytest.mark.parametrize("path", POST_ROUTES + GET_ROUTES)
@pytest.mark.parametrize("suffix", ["/", "/x", "/../../etc/passwd"])
def test_a_path_below_a_route_is_404(client: TestClient, path: str, suffix: str) -> None:
    r = client.request("POST" if path in POST_ROUTES else "GET", path + suffix, follow_redirects=False)
    refused(r, 404, "not-found")


@pytest.mark.parametrize("path", ["/v2/equilibrium", "/V1/equilibrium", "/v1", "/", "/v1/equilibrium%00"])
def test_no_such_path_is_404(client: TestClient, path: str) -> None:
    refused(client.post(path, json=small_stream(), follow_redirects=False), 404, "not-found")


@pytest.mark.parametrize("method", ["GET", "PUT", "PATCH", "DELETE"])
@pytest.mark.parametrize("path", POST_ROUTES)
def test_a_method_a_post_route_does_not_offer_is_405_with_allow(
    client: TestClient, path: str, method: str
) -> None:
    r = client.request(method, path)
    refused(r, 405, "method-not-allowed")
    assert r.headers["allow"] == "POST"


@pytest.mark.parametrize("method", ["POST", "PUT", "PATCH", "DELETE"])
@pytest.mark.parametrize("path", GET_ROUTES)
def test_a_method_a_get_route_does_not_offer_is_405_with_allow(
    client: TestClient, path: str, method: str
) -> None:
    r = client.request(method, path)
    refused(r, 405, "method-not-allowed")
    assert r.headers["allow"] == "GET"
