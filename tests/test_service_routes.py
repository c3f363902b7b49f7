"""Every route of the service answers as the contract says (real core)."""

from __future__ import annotations

import math
from typing import Any

from fastapi.testclient import TestClient

CONTRACT_KEYS = {
    "ph",
    "ionic_strength_mol_l",
    "buffer_capacity_mmol_l_per_ph",
    "alkalinity",
    "species",
    "systems",
    "charge_balance_residual_mol_l",
    "warnings",
    "model",
}


def test_equilibrium_returns_contract_fields(client: TestClient, stream: dict[str, Any]) -> None:
    r = client.post("/v1/equilibrium", json=stream)
    assert r.status_code == 200, r.text
    assert r.headers["content-type"] == "application/json"
    body = r.json()
    assert CONTRACT_KEYS <= body.keys()
    assert 0.0 < body["ph"] < 14.0
    assert {"total_mg_l_as_caco3", "phenolphthalein_mg_l_as_caco3"} <= body["alkalinity"].keys()
    assert all({"name", "mol_l", "activity"} <= s.keys() for s in body["species"])
    names = {s["name"] for s in body["systems"]}
    assert {"carbonate", "phosphate", "ammonia", "whey_acid"} <= names
    for system in body["systems"]:
        assert math.isclose(sum(system["fractions"].values()), 1.0, rel_tol=1e-9)
    assert body["model"]["activity_model"] == "davies"
    assert body["temperature_c"] == stream["temperature_c"]


def test_equilibrium_model_version_matches_systems_catalogue(client: TestClient, stream: dict[str, Any]) -> None:
    version = client.get("/v1/systems").json()["database_version"]
    assert client.post("/v1/equilibrium", json=stream).json()["model"]["database_version"] == version


def test_defaults_apply_when_omitted(client: TestClient) -> None:
    body = client.post(
        "/v1/equilibrium", json={"composition": [{"name": "Na+", "value": 1.0, "unit": "mmol/L"},
                                                 {"name": "Cl-", "value": 1.0, "unit": "mmol/L"}]}
    ).json()
    assert body["temperature_c"] == 25.0
    assert body["model"]["activity_model"] == "davies"


def test_batch_matches_single_results_in_order(client: TestClient, stream: dict[str, Any]) -> None:
    cooler = {**stream, "temperature_c": 12.0}
    ideal = {**stream, "activity_model": "ideal"}
    items = [stream, cooler, ideal]
    r = client.post("/v1/equilibrium/batch", json={"items": items})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["succeeded"] == 3 and body["failed"] == 0
    for item, out in zip(items, body["results"]):
        single = client.post("/v1/equilibrium", json=item).json()
        assert out["ok"] is True
        assert math.isclose(out["result"]["ph"], single["ph"], rel_tol=1e-12)
        assert out["result"]["temperature_c"] == item["temperature_c"]


def test_batch_partial_failure_keeps_order(client: TestClient, stream: dict[str, Any]) -> None:
    bad_unit = {"composition": [{"name": "sulfate", "value": 96.0, "unit": "mg/L as N"}]}
    duplicate = {"composition": [{"name": "Na+", "value": 1.0, "unit": "mmol/L"},
                                 {"name": "Na+", "value": 2.0, "unit": "mmol/L"}]}
    r = client.post("/v1/equilibrium/batch", json={"items": [stream, bad_unit, stream, duplicate]})
    assert r.status_code == 200, r.text
    results = r.json()["results"]
    assert [x["ok"] for x in results] == [True, False, True, False]
    assert r.json()["succeeded"] == 2 and r.json()["failed"] == 2
    unit_problem = results[1]["error"]
    assert unit_problem["status"] == 422
    assert unit_problem["type"].endswith(":input-error")
    assert unit_problem["errors"][0]["pointer"] == "/items/1/composition/0/unit"
    dup_problem = results[3]["error"]
    assert dup_problem["errors"][0]["pointer"] == "/items/3/composition/1/name"
    assert results[0]["result"]["ph"] == results[2]["result"]["ph"]


def test_systems_lists_every_contract_system_with_sources(client: TestClient) -> None:
    r = client.get("/v1/systems")
    assert r.status_code == 200
    body = r.json()
    names = {s["name"] for s in body["systems"]}
    contract = {"carbonate", "phosphate", "ammonia", "sulfide", "sulfate", "acetate", "propionate",
                "butyrate", "formate", "lactate", "citrate", "oxalate", "borate", "silicate",
                "fluoride", "nitrite", "sulfite", "hypochlorite", "cyanide"}
    assert contract <= names
    assert {"Na+", "K+", "Ca2+", "Mg2+", "Cl-", "NO3-", "Br-"} <= {i["name"] for i in body["strong_ions"]}
    for system in body["systems"]:
        assert system["steps"], system["name"]
        assert all(step["source"] for step in system["steps"])


def test_reagents_lists_catalogue(client: TestClient) -> None:
    r = client.get("/v1/reagents")
    assert r.status_code == 200
    reagents = r.json()["reagents"]
    assert {"NaOH", "H2SO4"} <= {x["name"] for x in reagents}
    for x in reagents:
        assert x["molar_mass_g_mol"] > 0
        assert x["active_substance"]
        assert x["sources"]


def test_health_and_readiness(client: TestClient) -> None:
    assert client.get("/healthz").json() == {"status": "ok"}
    ready = client.get("/readyz")
    assert ready.status_code == 200
    assert ready.json()["status"] == "ready"


def test_readyz_is_503_before_lifespan() -> None:
    from service.app import create_app
    from service.settings import Settings

    client = TestClient(create_app(Settings()))  # lifespan not entered: nothing loaded
    r = client.get("/readyz")
    assert r.status_code == 503
    assert r.headers["content-type"] == "application/problem+json"
    assert r.json()["type"].endswith(":not-ready")


def test_metrics_is_a_plain_route(client: TestClient) -> None:
    r = client.get("/metrics", follow_redirects=False)
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/plain")


def test_interactive_docs_and_schema_served(client: TestClient) -> None:
    assert client.get("/docs").status_code == 200
    doc = client.get("/openapi.json").json()
    assert "/v1/equilibrium" in doc["paths"]
