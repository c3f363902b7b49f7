"""POST /v1/dose, /v1/titration-curve, /v1/blend through the HTTP edge (real core)."""

from __future__ import annotations

from typing import Any

import pytest
from fastapi.testclient import TestClient

# Glenmarrow kraft mill, bleach-plant filtrate before neutralisation (an invented site).
FILTRATE: dict[str, Any] = {
    "temperature_c": 18.0,
    "composition": [
        {"name": "Na+", "value": 2.0, "unit": "mmol/L"},
        {"name": "Cl-", "value": 3.0, "unit": "mmol/L"},
        {"name": "carbonate", "value": 2.0, "unit": "mmol/L"},
    ],
}


def _dose(client: TestClient, **overrides: Any) -> Any:
    body = {"stream": FILTRATE, "reagent": {"name": "NaOH", "strength_pct_w": 25.0}, "setpoint_ph": 7.5,
            "flow_m3_h": 120.0, **overrides}
    return client.post("/v1/dose", json=body)


def test_dose_reaches_setpoint_with_product_quantities(client: TestClient) -> None:
    r = _dose(client)
    assert r.status_code == 200, r.text
    d = r.json()
    assert d["final_ph"] == pytest.approx(7.5, abs=1e-3)
    assert d["final"]["ph"] == pytest.approx(d["final_ph"], abs=1e-9)
    assert d["dose_mmol_l"] > 0 and d["already_met"] is False
    assert d["product_l_h"] == pytest.approx(d["product_l_per_m3"] * 120.0, rel=1e-12)
    assert d["reachable_min_ph"] <= 7.5 <= d["reachable_max_ph"]
    naoh = next(x for x in client.get("/v1/reagents").json()["reagents"] if x["name"] == "NaOH")
    assert d["dose_mg_l"] / d["dose_mmol_l"] == pytest.approx(naoh["molar_mass_g_mol"], rel=1e-12)
    assert "licensed operators" in d["safety_note"]
    assert all({"code", "severity", "source"} <= h.keys() for h in d["hazards"])


def test_dose_lies_on_the_titration_curve(client: TestClient) -> None:
    d = _dose(client).json()
    body = {"stream": FILTRATE, "reagent": {"name": "NaOH", "strength_pct_w": 25.0},
            "max_dose_mmol_l": d["dose_mmol_l"], "points": 2}
    curve = client.post("/v1/titration-curve", json=body).json()
    assert curve["points"][-1]["dose_mmol_l"] == pytest.approx(d["dose_mmol_l"], rel=1e-12)
    assert curve["points"][-1]["ph"] == pytest.approx(d["final_ph"], abs=1e-6)


def test_unreachable_setpoint_is_422_with_reachable_range(client: TestClient) -> None:
    r = _dose(client, reagent={"name": "NaHCO3"}, setpoint_ph=11.0)
    assert r.status_code == 422
    p = r.json()
    assert p["type"] == "urn:protolyte:problem:unreachable-setpoint"
    assert p["reachable_min_ph"] < p["reachable_max_ph"] < 11.0
    assert "dose_mmol_l" not in p


@pytest.mark.parametrize(
    ("overrides", "pointer"),
    [
        ({"reagent": {"name": "caustic_xyz"}}, "/reagent/name"),
        ({"reagent": {"name": "NaOH", "strength_pct_w": 0.0}}, "/reagent/strength_pct_w"),
        ({"setpoint_ph": 15.0}, "/setpoint_ph"),
        ({"flow_m3_h": -1.0}, "/flow_m3_h"),
        ({"stream": {"composition": [{"name": "sulfate", "value": 1.0, "unit": "mg/L as N"}]}}, "/stream/composition/0/unit"),
        ({"stream": {"composition": [{"name": "Na+", "value": 1.0, "unit": "mg/L"},
                                     {"name": "Na+", "value": 1.0, "unit": "mg/L"}]}}, "/stream/composition/1/name"),
    ],
)
def test_dose_errors_name_the_field(client: TestClient, overrides: dict[str, Any], pointer: str) -> None:
    r = _dose(client, **overrides)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == "application/problem+json"
    assert pointer in [e["pointer"] for e in r.json()["errors"]]


def test_titration_curve_points_and_monotone_for_a_base(client: TestClient) -> None:
    body = {"stream": FILTRATE, "reagent": {"name": "NaOH"}, "max_dose_mmol_l": 5.0, "points": 11}
    r = client.post("/v1/titration-curve", json=body)
    assert r.status_code == 200, r.text
    c = r.json()
    doses = [p["dose_mmol_l"] for p in c["points"]]
    assert len(doses) == 11 and doses[0] == 0.0 and doses[-1] == pytest.approx(5.0)
    phs = [p["ph"] for p in c["points"]]
    assert all(b > a for a, b in zip(phs, phs[1:]))
    assert all(p["buffer_capacity_mmol_l_per_ph"] > 0 for p in c["points"])
    assert c["safety_note"]


def test_blend_of_one_stream_is_the_stream(client: TestClient) -> None:
    r = client.post("/v1/blend", json={"streams": [{"flow_m3_h": 40.0, "stream": FILTRATE}]})
    assert r.status_code == 200, r.text
    b = r.json()
    alone = client.post("/v1/equilibrium", json=FILTRATE).json()
    assert b["total_flow_m3_h"] == 40.0
    assert b["result"]["ph"] == pytest.approx(alone["ph"], abs=1e-9)
    assert b["safety_note"]


def test_blend_composition_is_a_valid_request_stream(client: TestClient) -> None:
    warm = {**FILTRATE, "temperature_c": 40.0}
    b = client.post("/v1/blend", json={"streams": [{"flow_m3_h": 10.0, "stream": FILTRATE},
                                                   {"flow_m3_h": 30.0, "stream": warm}]}).json()
    again = client.post("/v1/equilibrium", json=b["composition"])
    assert again.status_code == 200, again.text
    assert again.json()["ph"] == pytest.approx(b["result"]["ph"], abs=1e-9)


def test_blend_error_points_into_the_part(client: TestClient) -> None:
    bad = {"composition": [{"name": "sulfate", "value": 1.0, "unit": "mg/L as N"}]}
    r = client.post("/v1/blend", json={"streams": [{"flow_m3_h": 1.0, "stream": FILTRATE},
                                                   {"flow_m3_h": 1.0, "stream": bad}]})
    assert r.status_code == 422
    assert r.json()["errors"][0]["pointer"] == "/streams/1/stream/composition/0/unit"
    r = client.post("/v1/blend", json={"streams": [{"flow_m3_h": 0.0, "stream": FILTRATE}]})
    assert r.status_code == 422 and r.json()["errors"][0]["pointer"] == "/streams/0/flow_m3_h"
