"""A client generated from the committed OpenAPI document works against the real server.

``openapi-python-client generate --fail-on-warning`` (a skipped operation or an unnamed
schema fails the generation), then every operation is called through the generated
client on ``protolyte serve`` (loopback, a free port, API key set) — once valid, once
invalid — and the typed result or the typed problem with its field errors is checked.
"""

from __future__ import annotations

import importlib
import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from collections.abc import Iterator
from pathlib import Path
from types import ModuleType
from typing import Any

import pytest

ROOT = Path(__file__).resolve().parents[1]
API_KEY = "tamsworth-vale-integration-key"
PACKAGE = "protolyte_client"

# Tamsworth Vale creamery (an invented site): effluent equalisation tank.
STREAM: dict[str, Any] = {
    "temperature_c": 31.5,
    "composition": [
        {"name": "Na+", "value": 410.0, "unit": "mg/L"},
        {"name": "Cl-", "value": 520.0, "unit": "mg/L"},
        {"name": "carbonate", "value": 6.4, "unit": "mmol/L"},
        {"name": "ammonia", "value": 22.0, "unit": "mg/L as N"},
    ],
}
NEGATIVE = {"composition": [{"name": "Na+", "value": -1.0, "unit": "mg/L"}]}


def _generator() -> str | None:
    beside = Path(sys.executable).with_name("openapi-python-client")
    return str(beside) if beside.exists() else shutil.which("openapi-python-client")


@pytest.fixture(scope="module")
def client_pkg(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, ModuleType]]:
    exe = _generator()
    if exe is None:
        pytest.skip("openapi-python-client is not installed (pip install -c constraints.txt -e '.[test]')")
    out = tmp_path_factory.mktemp("client")
    env = {**os.environ, "PATH": f"{Path(sys.executable).parent}{os.pathsep}{os.environ.get('PATH', '')}"}
    proc = subprocess.run(
        [exe, "generate", "--path", str(ROOT / "openapi" / "openapi.json"), "--fail-on-warning",
         "--output-path", str(out / "pkg")],
        cwd=out, env=env, capture_output=True, text=True, timeout=120, check=False,
    )
    assert proc.returncode == 0, proc.stdout + proc.stderr  # warnings (skipped operations) fail here
    assert "Warning" not in proc.stdout + proc.stderr, proc.stdout + proc.stderr
    sys.path.insert(0, str(out / "pkg"))
    try:
        names = [
            "client", "models", "api.equilibrium.solve_equilibrium", "api.equilibrium.solve_equilibrium_batch",
            "api.dosing.dose_to_setpoint", "api.dosing.titration_curve", "api.dosing.blend_streams",
            "api.catalogue.list_systems", "api.catalogue.list_reagents",
        ]
        yield {n: importlib.import_module(f"{PACKAGE}.{n}") for n in names}
    finally:
        sys.path.remove(str(out / "pkg"))
        for mod in [m for m in sys.modules if m == PACKAGE or m.startswith(PACKAGE + ".")]:
            del sys.modules[mod]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.fixture(scope="module")
def base_url() -> Iterator[str]:
    port = _free_port()
    env = {**os.environ, "PROTOLYTE_API_KEY": API_KEY, "PROTOLYTE_HOST": "127.0.0.1", "PROTOLYTE_WORKERS": "1"}
    proc = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--port", str(port)],
        cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    try:
        deadline = time.monotonic() + 60
        while True:
            assert proc.poll() is None, f"server exited with {proc.returncode}"
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/readyz", timeout=1) as r:
                    if r.status == 200:
                        break
            except OSError:
                assert time.monotonic() < deadline, "server did not become ready"
                time.sleep(0.2)
        yield f"http://127.0.0.1:{port}"
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()


def _client(pkg: dict[str, ModuleType], base_url: str, key: str = API_KEY, request_id: str | None = None) -> Any:
    c = pkg["client"].AuthenticatedClient(
        base_url=base_url, token=key, prefix="", auth_header_name="X-API-Key", timeout=30.0,
    )
    return c.with_headers({"X-Request-ID": request_id}) if request_id else c


def _problem(pkg: dict[str, ModuleType], resp: Any, status: int, slug: str) -> Any:
    assert resp.status_code == status, resp.content
    problem = resp.parsed
    assert isinstance(problem, pkg["models"].Problem), type(problem)
    assert problem.status == status and problem.type_ == f"urn:protolyte:problem:{slug}"
    assert problem.instance == resp.headers["x-request-id"]
    return problem


def _field_errors(pkg: dict[str, ModuleType], problem: Any) -> list[str]:
    assert problem.errors, problem
    assert all(isinstance(e, pkg["models"].FieldError) and e.detail for e in problem.errors)
    return [e.pointer for e in problem.errors]


def test_equilibrium_valid_and_invalid(client_pkg: dict[str, ModuleType], base_url: str) -> None:
    m, op = client_pkg["models"], client_pkg["api.equilibrium.solve_equilibrium"]
    c = _client(client_pkg, base_url, request_id="tv-eq-0001")
    resp = op.sync_detailed(client=c, body=m.Stream.from_dict(STREAM))
    assert resp.status_code == 200 and resp.headers["x-request-id"] == "tv-eq-0001"
    result = resp.parsed
    assert isinstance(result, m.EquilibriumResponse) and 6.0 < result.ph < 10.0
    assert all(isinstance(s, m.Species) for s in result.species)
    bad = op.sync_detailed(client=c, body=m.Stream.from_dict(NEGATIVE))
    problem = _problem(client_pkg, bad, 422, "validation-error")
    assert problem.instance == "tv-eq-0001"
    assert _field_errors(client_pkg, problem) == ["/composition/0/value"]


def test_batch_valid_with_a_failing_item_and_invalid(client_pkg: dict[str, ModuleType], base_url: str) -> None:
    m, op = client_pkg["models"], client_pkg["api.equilibrium.solve_equilibrium_batch"]
    c = _client(client_pkg, base_url)
    unfit = {"composition": [{"name": "sulfate", "value": 96.0, "unit": "mg/L as N"}]}
    resp = op.sync_detailed(client=c, body=m.BatchRequest.from_dict({"items": [STREAM, unfit]}))
    assert resp.status_code == 200
    batch = resp.parsed
    assert isinstance(batch, m.BatchResponse) and (batch.succeeded, batch.failed) == (1, 1)
    first, second = batch.results
    assert isinstance(first, m.BatchItemOk) and isinstance(first.result, m.EquilibriumResponse)
    assert isinstance(second, m.BatchItemError) and isinstance(second.error, m.Problem)
    assert second.error.type_ == "urn:protolyte:problem:input-error"
    assert _field_errors(client_pkg, second.error) == ["/items/1/composition/0/unit"]
    bad = op.sync_detailed(client=c, body=m.BatchRequest.from_dict({"items": [STREAM, NEGATIVE]}))
    assert _field_errors(client_pkg, _problem(client_pkg, bad, 422, "validation-error")) == [
        "/items/1/composition/0/value"
    ]


def _dose_body(setpoint: float) -> dict[str, Any]:
    return {"stream": STREAM, "reagent": {"name": "H2SO4"}, "setpoint_ph": setpoint, "flow_m3_h": 40.0}


def test_dose_valid_and_invalid(client_pkg: dict[str, ModuleType], base_url: str) -> None:
    m, op = client_pkg["models"], client_pkg["api.dosing.dose_to_setpoint"]
    c = _client(client_pkg, base_url)
    resp = op.sync_detailed(client=c, body=m.DoseRequest.from_dict(_dose_body(6.5)))
    assert resp.status_code == 200, resp.content
    dose = resp.parsed
    assert isinstance(dose, m.DoseResponse) and dose.dose_mmol_l > 0 and abs(dose.final_ph - 6.5) < 0.01
    assert dose.safety_note
    bad = op.sync_detailed(client=c, body=m.DoseRequest.from_dict(_dose_body(15.5)))
    assert "/setpoint_ph" in _field_errors(client_pkg, _problem(client_pkg, bad, 422, "validation-error"))


def test_titration_curve_valid_and_invalid(client_pkg: dict[str, ModuleType], base_url: str) -> None:
    m, op = client_pkg["models"], client_pkg["api.dosing.titration_curve"]
    c = _client(client_pkg, base_url)
    body = {"stream": STREAM, "reagent": {"name": "H2SO4"}, "max_dose_mmol_l": 5.0, "points": 21}
    resp = op.sync_detailed(client=c, body=m.TitrationRequest.from_dict(body))
    assert resp.status_code == 200, resp.content
    curve = resp.parsed
    assert isinstance(curve, m.TitrationResponse) and len(curve.points) == 21
    assert all(isinstance(p, m.TitrationPoint) for p in curve.points)
    assert curve.points[0].ph > curve.points[-1].ph  # acid lowers the pH
    bad = op.sync_detailed(client=c, body=m.TitrationRequest.from_dict({**body, "max_dose_mmol_l": -5.0}))
    assert "/max_dose_mmol_l" in _field_errors(client_pkg, _problem(client_pkg, bad, 422, "validation-error"))


def test_blend_valid_and_invalid(client_pkg: dict[str, ModuleType], base_url: str) -> None:
    m, op = client_pkg["models"], client_pkg["api.dosing.blend_streams"]
    c = _client(client_pkg, base_url)
    other = {"temperature_c": 12.0, "composition": [{"name": "Cl-", "value": 2, "unit": "mmol/L"},
                                                    {"name": "Na+", "value": 2, "unit": "mmol/L"}]}
    body = {"streams": [{"flow_m3_h": 10.0, "stream": STREAM}, {"flow_m3_h": 30.0, "stream": other}]}
    resp = op.sync_detailed(client=c, body=m.BlendRequest.from_dict(body))
    assert resp.status_code == 200, resp.content
    blend = resp.parsed
    assert isinstance(blend, m.BlendResponse) and isinstance(blend.result, m.EquilibriumResponse)
    body["streams"][1]["flow_m3_h"] = -30.0
    bad = op.sync_detailed(client=c, body=m.BlendRequest.from_dict(body))
    assert "/streams/1/flow_m3_h" in _field_errors(client_pkg, _problem(client_pkg, bad, 422, "validation-error"))


@pytest.mark.parametrize(("name", "model"), [("list_systems", "SystemsResponse"), ("list_reagents", "ReagentsResponse")])
def test_catalogues_with_and_without_the_key(
    client_pkg: dict[str, ModuleType], base_url: str, name: str, model: str
) -> None:
    """GET operations have no body: the invalid call is one with a wrong API key."""
    m, op = client_pkg["models"], client_pkg[f"api.catalogue.{name}"]
    resp = op.sync_detailed(client=_client(client_pkg, base_url))
    assert resp.status_code == 200 and isinstance(resp.parsed, getattr(m, model))
    assert resp.parsed.to_dict()  # a populated catalogue
    denied = op.sync_detailed(client=_client(client_pkg, base_url, key="wrong-key"))
    problem = _problem(client_pkg, denied, 401, "unauthorized")
    assert not problem.errors and denied.headers.get("www-authenticate")
