"""Numerical edges over HTTP: extreme but legal streams converge or fail with a clear reason,
and a solve that did not converge is never returned as a result.

The core's own edges (fractions at pKa 17, roots outside pH −1…15, iteration caps) are in
``tests/test_core_edges.py``; here each case goes through the whole service, where a
schema-valid request must end as a trustworthy result or a 422 problem naming the reason.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from typing import Any

import pytest
from fastapi.testclient import TestClient

from models import solver
from models.thermo import load_database
from service.app import create_app
from service.settings import Settings

PROBLEM = "application/problem+json"
MODELS = ("ideal", "davies", "extended_debye_huckel")


@pytest.fixture(scope="module")
def client() -> Iterator[TestClient]:
    with TestClient(create_app(Settings())) as c:
        yield c


def solved(r: Any) -> dict[str, Any]:
    """A 200 result whose charge balance closes and whose fractions sum to 1."""
    assert r.status_code == 200, r.text
    res = r.json()
    terms = [s["charge"] * s["mol_l"] for s in res["species"]]
    assert abs(sum(terms)) <= 1e-10 * max(abs(t) for t in terms)
    for system in res["systems"]:
        assert math.fsum(system["fractions"].values()) == pytest.approx(1.0, abs=1e-12)
    assert all(math.isfinite(s["activity"]) for s in res["species"])
    return res


def failed(r: Any, reason: str) -> dict[str, Any]:
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == PROBLEM
    body = r.json()
    assert body["type"] == "urn:protolyte:problem:solve-failed"
    assert body["reason"] == reason and body["detail"]
    assert "ph" not in body
    return body


# ------------------------------------------------------------------ 1 mol/L strong acid


@pytest.mark.parametrize("model", MODELS)
def test_one_mol_per_litre_strong_acid_converges(client: TestClient, model: str) -> None:
    # Cl− alone: the charge balance is closed by 1 mol/L of H+ (hydrochloric acid).
    r = client.post("/v1/equilibrium", json={"activity_model": model,
                                             "composition": [{"name": "Cl-", "value": 1.0, "unit": "mol/L"}]})
    res = solved(r)
    h = next(s for s in res["species"] if s["name"] == "H+")
    assert h["mol_l"] == pytest.approx(1.0, rel=1e-6)
    assert res["ph"] == pytest.approx(-math.log10(h["activity"]), abs=1e-9)  # pH = −log10 a(H+)
    assert -0.2 < res["ph"] < 0.3
    assert res["ionic_strength_mol_l"] == pytest.approx(1.0, rel=1e-3)


@pytest.mark.parametrize("model", ["davies", "extended_debye_huckel"])
def test_one_mol_per_litre_strong_acid_warns_that_the_model_is_past_its_validity(
    client: TestClient, model: str
) -> None:
    r = client.post("/v1/equilibrium", json={"activity_model": model,
                                             "composition": [{"name": "Cl-", "value": 1.0, "unit": "mol/L"}]})
    assert any("validity" in w for w in solved(r)["warnings"])


def test_one_mol_per_litre_strong_base_converges(client: TestClient) -> None:
    r = client.post("/v1/equilibrium", json={"composition": [{"name": "Na+", "value": 1.0, "unit": "mol/L"}]})
    oh = next(s for s in solved(r)["species"] if s["name"] == "OH-")
    assert oh["mol_l"] == pytest.approx(1.0, rel=1e-6)


# ------------------------------------------------------------------ trace totals


@pytest.mark.parametrize("model", MODELS)
def test_nanomolar_totals_converge_near_neutral_and_keep_their_totals(client: TestClient, model: str) -> None:
    names = ["carbonate", "phosphate", "ammonia", "acetate", "borate"]
    stream = {"activity_model": model,
              "composition": [{"name": n, "value": 1e-9, "unit": "mol/L"} for n in names]}
    water = solved(client.post("/v1/equilibrium", json={"activity_model": model, "composition": [
        {"name": "Na+", "value": 0.0, "unit": "mol/L"}]}))
    res = solved(client.post("/v1/equilibrium", json=stream))
    assert abs(res["ph"] - water["ph"]) < 0.01  # 5 nmol/L cannot move water by more
    assert {s["name"] for s in res["systems"]} == set(names)
    for system in res["systems"]:
        assert system["total_mol_l"] == pytest.approx(1e-9, rel=1e-9)


def test_totals_at_the_smallest_double_do_not_break_the_solve(client: TestClient) -> None:
    stream = {"composition": [{"name": "carbonate", "value": 5e-324, "unit": "mol/L"},
                              {"name": "Na+", "value": 1e-300, "unit": "mol/L"}]}
    assert 6.9 < solved(client.post("/v1/equilibrium", json=stream))["ph"] < 7.1


# ------------------------------------------------------------------ extreme pKa


@pytest.mark.parametrize("pka", [16.0, 25.0])
def test_an_acid_of_pka_16_or_more_does_not_dissociate_in_water(client: TestClient, pka: float) -> None:
    # Ka·C = 1e-19 vs Kw = 1e-14: [H+] rises by 1e-5 relative, ΔpH ≈ ½·0.434·1e-5 ≈ 2e-6.
    water = solved(client.post("/v1/equilibrium", json={"activity_model": "ideal", "composition": [
        {"name": "Na+", "value": 0.0, "unit": "mol/L"}]}))
    res = solved(client.post("/v1/equilibrium", json={
        "activity_model": "ideal",
        "composition": [{"name": "weak", "value": 1.0, "unit": "mmol/L"}],
        "custom_systems": [{"name": "weak", "pka": [pka]}]}))
    assert res["ph"] == pytest.approx(water["ph"], abs=1e-5)
    assert res["systems"][0]["fractions"]["weak(0)"] == pytest.approx(1.0, abs=1e-6)


@pytest.mark.parametrize("pka", [16.0, 25.0])
def test_the_salt_of_a_pka_16_acid_hydrolyses_completely_like_sodium_hydroxide(
    client: TestClient, pka: float
) -> None:
    # A⁻ + H2O → HA + OH⁻ with Kb = Kw/Ka ≥ 100: Na+ with this "buffer" is plain NaOH.
    naoh = solved(client.post("/v1/equilibrium", json={"activity_model": "ideal", "composition": [
        {"name": "Na+", "value": 1.0, "unit": "mmol/L"}]}))
    res = solved(client.post("/v1/equilibrium", json={
        "activity_model": "ideal",
        "composition": [{"name": "Na+", "value": 1.0, "unit": "mmol/L"},
                        {"name": "weak", "value": 1.0, "unit": "mmol/L"}],
        "custom_systems": [{"name": "weak", "pka": [pka]}]}))
    assert res["ph"] == pytest.approx(naoh["ph"], abs=1e-4)
    assert 10.9 < res["ph"] < 11.1


def test_a_system_spanning_pka_minus_5_to_25_solves(client: TestClient) -> None:
    res = solved(client.post("/v1/equilibrium", json={
        "activity_model": "ideal",
        "composition": [{"name": "wide", "value": 1.0, "unit": "mmol/kg"}],
        "custom_systems": [{"name": "wide", "pka": [-5.0, 2.0, 9.0, 16.0, 25.0], "top_charge": 0}]}))
    assert len(res["systems"][0]["fractions"]) == 6


# ------------------------------------------------------------------ many systems


def _twelve() -> list[str]:
    names = [n for n in ("carbonate", "phosphate", "ammonia", "sulfide", "sulfate", "acetate",
                         "propionate", "butyrate", "formate", "lactate", "citrate", "oxalate",
                         "borate", "silicate", "fluoride", "nitrite", "sulfite", "hypochlorite")
             if n in load_database().systems][:12]
    assert len(names) == 12
    return names


@pytest.mark.parametrize("model", MODELS)
def test_twelve_systems_at_once_converge(client: TestClient, model: str) -> None:
    stream = {"activity_model": model,
              "composition": [{"name": n, "value": 1.0, "unit": "mmol/L"} for n in _twelve()]
              + [{"name": "Na+", "value": 15.0, "unit": "mmol/L"}]}
    res = solved(client.post("/v1/equilibrium", json=stream))
    assert len(res["systems"]) == 12


def test_twelve_built_in_and_eight_custom_systems_at_once_converge(client: TestClient) -> None:
    customs = [{"name": f"acid{k}", "pka": [1.0 + k, 4.0 + k, 8.0 + k], "top_charge": k % 3 - 1}
               for k in range(8)]
    stream = {"composition": [{"name": n, "value": 1.0, "unit": "mmol/L"} for n in _twelve()]
              + [{"name": c["name"], "value": 0.5, "unit": "mmol/L"} for c in customs]
              + [{"name": "Na+", "value": 20.0, "unit": "mmol/L"}],
              "custom_systems": customs}
    assert len(solved(client.post("/v1/equilibrium", json=stream))["systems"]) == 20


def test_a_batch_of_twelve_system_streams_over_the_temperature_range_all_converge(client: TestClient) -> None:
    items = [{"temperature_c": float(t), "composition": [{"name": n, "value": 1.0, "unit": "mmol/L"}
                                                        for n in _twelve()]}
             for t in range(0, 101, 5)]
    body = client.post("/v1/equilibrium/batch", json={"items": items}).json()
    assert body["failed"] == 0 and body["succeeded"] == len(items)


# ------------------------------------------------------------------ beyond every model


def test_a_neutral_total_beyond_every_model_is_refused_naming_the_value(client: TestClient) -> None:
    # Defect found by this suite: 1e6 mol/L of carbonate (mostly neutral H2CO3*, γ = 1, so
    # the ionic strength stayed at 0.67 mol/kg) was answered 200 with "pH 0.18".
    stream = {"composition": [{"name": "carbonate", "value": 1.0e6, "unit": "mol/L"}]}
    r = client.post("/v1/equilibrium", json=stream)
    assert r.status_code == 422 and r.headers["content-type"] == PROBLEM
    body = r.json()
    assert body["type"] == "urn:protolyte:problem:input-error" and "ph" not in body
    assert [e["pointer"] for e in body["errors"]] == ["/composition/0/value"]
    assert "beyond every activity model" in body["detail"]


@pytest.mark.parametrize(("name", "value", "unit"), [("ammonia", 1.0e6, "g/L"), ("borate", 1.0e6, "mol/kg"),
                                                     ("acetate", 3.1, "mol/kg")])
def test_an_undissociated_total_above_3_mol_per_kg_fails_its_batch_item_alone(
    client: TestClient, name: str, value: float, unit: str
) -> None:
    items = [{"composition": [{"name": name, "value": value, "unit": unit}]},
             {"composition": [{"name": name, "value": 2.9, "unit": "mol/kg"}]}]
    bad, ok = client.post("/v1/equilibrium/batch", json={"items": items}).json()["results"]
    assert bad["ok"] is False and [e["pointer"] for e in bad["error"]["errors"]] == ["/items/0/composition/0/value"]
    assert ok["ok"] is True


@pytest.mark.parametrize("model", MODELS)
def test_five_mol_per_litre_brine_is_refused_for_its_ionic_strength(client: TestClient, model: str) -> None:
    brine = {"activity_model": model, "composition": [{"name": "Na+", "value": 5.0, "unit": "mol/L"},
                                                      {"name": "Cl-", "value": 5.0, "unit": "mol/L"}]}
    failed(client.post("/v1/equilibrium", json=brine), "ionic_strength_out_of_range")


def test_a_root_below_ph_minus_1_is_refused_not_clipped(client: TestClient) -> None:
    acid = {"activity_model": "ideal", "composition": [{"name": "Cl-", "value": 12.0, "unit": "mol/kg"}]}
    failed(client.post("/v1/equilibrium", json=acid), "ph_below_model_range")


# ------------------------------------------------------------------ non-convergence


@pytest.fixture
def starved(monkeypatch: pytest.MonkeyPatch) -> Iterator[TestClient]:
    """A started app whose solver then gets too few Newton steps for any stream."""
    with TestClient(create_app(Settings())) as c:  # start-up self-test with the real cap
        monkeypatch.setattr(solver, "MAX_NEWTON", 2)
        yield c


CARBONATE = {"composition": [{"name": "carbonate", "value": 2.0, "unit": "mmol/L"},
                             {"name": "Na+", "value": 1.0, "unit": "mmol/L"}]}


def test_a_solve_that_did_not_converge_is_a_422_not_a_result(starved: TestClient) -> None:
    failed(starved.post("/v1/equilibrium", json=CARBONATE), "not_converged")


def test_a_batch_item_that_did_not_converge_is_an_error_not_a_result(starved: TestClient) -> None:
    body = starved.post("/v1/equilibrium/batch", json={"items": [CARBONATE, CARBONATE]}).json()
    assert body["succeeded"] == 0 and body["failed"] == 2
    for item in body["results"]:
        assert item["ok"] is False and set(item) == {"ok", "error"}
        assert item["error"]["reason"] == "not_converged"


@pytest.mark.parametrize("route", ["/v1/dose", "/v1/titration-curve", "/v1/blend"])
def test_a_dosing_route_that_cannot_converge_is_a_422_not_a_result(starved: TestClient, route: str) -> None:
    req: dict[str, Any] = {
        "/v1/dose": {"stream": CARBONATE, "reagent": {"name": "NaOH"}, "setpoint_ph": 9.0},
        "/v1/titration-curve": {"stream": CARBONATE, "reagent": {"name": "NaOH"}, "max_dose_mmol_l": 5.0},
        "/v1/blend": {"streams": [{"flow_m3_h": 1.0, "stream": CARBONATE}]},
    }[route]
    r = starved.post(route, json=req)
    assert r.status_code == 422, r.text
    body = r.json()
    assert body["type"] == "urn:protolyte:problem:solve-failed" and body["detail"]
    assert set(body) <= {"type", "title", "status", "detail", "instance", "reason"}
