"""API key on /v1 (constant-time compare), open health and metrics, CORS closed by default."""

from __future__ import annotations

import inspect
from typing import Any

import pytest

from service import auth

from conftest import AppFactory

KEY = "kestrel-7f3a-historian"


@pytest.fixture
def keyed(make_client: AppFactory) -> Any:
    return make_client(api_key=KEY)


def test_right_key_is_accepted(keyed: Any, stream: dict[str, Any]) -> None:
    assert keyed.post("/v1/equilibrium", json=stream, headers={"X-API-Key": KEY}).status_code == 200
    assert keyed.get("/v1/systems", headers={"X-API-Key": KEY}).status_code == 200


@pytest.mark.parametrize("headers", [{}, {"X-API-Key": "wrong"}, {"X-API-Key": KEY + "x"}, {"X-API-Key": ""}])
def test_missing_or_wrong_key_is_401(keyed: Any, stream: dict[str, Any], headers: dict[str, str]) -> None:
    for r in (
        keyed.post("/v1/equilibrium", json=stream, headers=headers),
        keyed.post("/v1/equilibrium/batch", json={"items": [stream]}, headers=headers),
        keyed.get("/v1/systems", headers=headers),
        keyed.get("/v1/reagents", headers=headers),
        keyed.post("/v1/dose", json={"stream": stream, "reagent": {"name": "NaOH"}, "setpoint_ph": 7.0}, headers=headers),
        keyed.post("/v1/blend", json={"streams": [{"flow_m3_h": 1.0, "stream": stream}]}, headers=headers),
    ):
        assert r.status_code == 401, r.text
        assert r.headers["content-type"] == "application/problem+json"
        assert r.json()["type"] == "urn:protolyte:problem:unauthorized"
        assert "X-API-Key" in r.headers["www-authenticate"]
        assert KEY not in r.text


def test_health_and_metrics_stay_open(keyed: Any) -> None:
    assert keyed.get("/healthz").status_code == 200
    assert keyed.get("/readyz").status_code == 200
    assert keyed.get("/metrics").status_code == 200


def test_no_key_configured_means_open(client: Any, stream: dict[str, Any]) -> None:
    assert client.post("/v1/equilibrium", json=stream).status_code == 200


def test_key_compared_in_constant_time() -> None:
    source = inspect.getsource(auth)
    assert "hmac.compare_digest" in source
    assert "== want" not in source and "want ==" not in source


def test_openapi_marks_key_required_only_when_set(make_client: AppFactory) -> None:
    open_doc = make_client().get("/openapi.json").json()
    keyed_doc = make_client(api_key=KEY).get("/openapi.json").json()
    op = "/v1/equilibrium"
    assert open_doc["paths"][op]["post"]["security"] == [{"ApiKeyAuth": []}, {}]
    assert keyed_doc["paths"][op]["post"]["security"] == [{"ApiKeyAuth": []}]


def test_cors_closed_by_default(client: Any) -> None:
    r = client.options(
        "/v1/equilibrium",
        headers={"Origin": "https://scada.example", "Access-Control-Request-Method": "POST"},
    )
    assert "access-control-allow-origin" not in r.headers


def test_cors_open_for_configured_origin(make_client: AppFactory, stream: dict[str, Any]) -> None:
    c = make_client(cors_origins=("https://hmi.example",))
    r = c.post("/v1/equilibrium", json=stream, headers={"Origin": "https://hmi.example"})
    assert r.headers["access-control-allow-origin"] == "https://hmi.example"
    r = c.post("/v1/equilibrium", json=stream, headers={"Origin": "https://other.example"})
    assert "access-control-allow-origin" not in r.headers
