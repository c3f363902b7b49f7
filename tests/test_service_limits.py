"""Limits and security of issue 7 beyond ``tests/test_service_errors.py`` and
``tests/test_service_security.py``: the time budget with the real core, the API key on
every ``/v1`` route and nowhere else, no internals in any answer, CORS, pinned installs.
(Body size and batch cap are in ``tests/test_bad_input_catalogue.py``.)"""

from __future__ import annotations

import hmac
import re
import time
import tomllib
from collections.abc import Iterator
from importlib import metadata
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient
from packaging.requirements import Requirement

from models import equilibrium, thermo
from models.stream import StreamSpec
from service.app import create_app
from service.core import Core, default_core
from service.settings import Settings
from service.state import SELF_TEST_STREAM

from conftest import CREAMERY_STREAM, AppFactory

ROOT = Path(__file__).resolve().parents[1]
KEY = "merlin-0c41-scada"
LEAKS = ("Traceback", "/work/", ".py", "site-packages", 'File "', "RuntimeError")
SMALL = {"composition": [{"name": "Na+", "value": 2.0, "unit": "mmol/L"},
                         {"name": "carbonate", "value": 2.0, "unit": "mmol/L"}]}


# ------------------------------------------------------------------ time budget


def test_a_batch_over_the_time_budget_is_a_prompt_503_and_the_worker_recovers(make_client: AppFactory) -> None:
    c = make_client(solve_time_budget_s=0.05)
    assert c.post("/v1/equilibrium", json=SMALL).status_code == 200
    start = time.perf_counter()
    r = c.post("/v1/equilibrium/batch", json={"items": [CREAMERY_STREAM] * 3000})
    answered = time.perf_counter() - start
    assert r.status_code == 503, r.text[:300]
    assert r.headers["content-type"] == "application/problem+json"
    body = r.json()
    assert body["type"] == "urn:protolyte:problem:time-budget-exceeded"
    assert "0.05 s" in body["detail"] and "PROTOLYTE_SOLVE_TIME_BUDGET_S" in body["detail"]
    assert r.headers["retry-after"] and "results" not in body
    assert answered < 5.0  # validation of 3000 items, then 0.05 s: not the whole solve
    assert c.get("/healthz").status_code == 200  # the event loop was never blocked
    # The abandoned solve is bounded by the core's iteration caps: the worker comes back.
    deadline = time.monotonic() + 30.0
    while (status := c.post("/v1/equilibrium", json=SMALL).status_code) != 200 and time.monotonic() < deadline:
        time.sleep(0.2)
    assert status == 200


def test_a_titration_curve_over_the_time_budget_is_a_503(make_client: AppFactory) -> None:
    c = make_client(solve_time_budget_s=0.001)
    req = {"stream": CREAMERY_STREAM, "reagent": {"name": "NaOH"}, "max_dose_mmol_l": 100.0, "points": 1001}
    r = c.post("/v1/titration-curve", json=req)
    assert r.status_code == 503 and r.json()["type"] == "urn:protolyte:problem:time-budget-exceeded"
    assert "points" not in r.json()


# ------------------------------------------------------------------ API key


def _v1_operations() -> list[tuple[str, str]]:
    import json

    doc = json.loads((ROOT / "openapi" / "openapi.json").read_text(encoding="utf-8"))
    return [(m.upper(), p) for p, ops in doc["paths"].items() for m in ops]


@pytest.fixture(scope="module")
def keyed() -> Iterator[TestClient]:
    with TestClient(create_app(Settings(api_key=KEY))) as c:
        yield c


def test_every_v1_operation_of_the_document_is_behind_the_key(keyed: TestClient) -> None:
    operations = _v1_operations()
    assert len(operations) >= 7 and all(p.startswith("/v1/") for _, p in operations)
    for method, path in operations:
        r = keyed.request(method, path, json=SMALL)
        assert r.status_code == 401, (method, path, r.text)
        assert r.json()["type"] == "urn:protolyte:problem:unauthorized"


@pytest.mark.parametrize("path", ["/healthz", "/readyz", "/metrics", "/openapi.json", "/docs"])
def test_routes_outside_v1_need_no_key(keyed: TestClient, path: str) -> None:
    assert keyed.get(path).status_code == 200


def test_without_the_key_a_request_learns_nothing_about_the_schema(keyed: TestClient) -> None:
    # authentication comes before validation and the batch cap: no field names leak
    for r in (keyed.post("/v1/equilibrium", json={"composition": [{"name": "Na+", "value": -1}]}),
              keyed.post("/v1/equilibrium/batch", json={"items": [SMALL] * 20_000})):
        assert r.status_code == 401
        assert "errors" not in r.json() and "composition" not in r.text and "items" not in r.text


@pytest.mark.parametrize("raw", [b"\xe9\xe9", b"\xff\xfe\x80", KEY.encode() + b"\xe9", b" " + KEY.encode()])
def test_a_key_with_odd_bytes_is_a_401_not_a_500(keyed: TestClient, raw: bytes) -> None:
    r = keyed.post("/v1/equilibrium", json=SMALL, headers={"X-API-Key": raw})
    assert r.status_code == 401


def test_the_key_goes_through_hmac_compare_digest(monkeypatch: pytest.MonkeyPatch, keyed: TestClient) -> None:
    calls: list[tuple[bytes, bytes]] = []
    real = hmac.compare_digest

    def spy(a: Any, b: Any) -> bool:
        calls.append((a, b))
        return real(a, b)

    monkeypatch.setattr(hmac, "compare_digest", spy)
    assert keyed.get("/v1/systems", headers={"X-API-Key": "guess"}).status_code == 401
    assert keyed.get("/v1/systems", headers={"X-API-Key": KEY}).status_code == 200
    assert calls == [(b"guess", KEY.encode()), (KEY.encode(), KEY.encode())]


# ------------------------------------------------------------------ no internals in any answer


def _broken_core() -> Core:
    real = default_core()

    def boom(*_: Any, **__: Any) -> Any:
        raise RuntimeError(f"defect in {__file__} at /work/main/models/solver.py line 1")

    def solve(spec: StreamSpec) -> Any:
        return equilibrium.solve(spec) if spec == SELF_TEST_STREAM else boom()

    assert real.dosing is not None
    dosing = type(real.dosing)(real.dosing.resolve_reagent, boom, boom, boom)
    return Core(solve=solve, solve_many=boom, load_database=thermo.load_database,
                load_reagents=real.load_reagents, reagents_version=real.reagents_version, dosing=dosing)


@pytest.mark.parametrize(("path", "body"), [
    ("/v1/equilibrium", SMALL),
    ("/v1/equilibrium/batch", {"items": [SMALL]}),
    ("/v1/dose", {"stream": SMALL, "reagent": {"name": "NaOH"}, "setpoint_ph": 9.0}),
    ("/v1/titration-curve", {"stream": SMALL, "reagent": {"name": "NaOH"}, "max_dose_mmol_l": 2.0}),
    ("/v1/blend", {"streams": [{"flow_m3_h": 1.0, "stream": SMALL}]}),
])
def test_a_defect_on_any_route_is_a_bare_500_problem(make_client: AppFactory, path: str, body: dict[str, Any]) -> None:
    c = make_client(core=_broken_core(), raise_server_exceptions=False)
    r = c.post(path, json=body, headers={"X-Request-ID": "defect-7"})
    assert r.status_code == 500 and r.headers["content-type"] == "application/problem+json"
    assert r.json()["instance"] == "defect-7"
    for leak in LEAKS:
        assert leak not in r.text, leak


BAD_REQUESTS: list[tuple[str, str, bytes, str]] = [
    ("POST", "/v1/equilibrium", b'{"composition": [', "application/json"),
    ("POST", "/v1/equilibrium", b'{"composition": []}', "application/json"),
    ("POST", "/v1/equilibrium", b'{"composition": [{"name": "x", "value": 1, "unit": "mg/L"}]}', "application/json"),
    ("POST", "/v1/equilibrium", b"[" * 50_000, "application/json"),
    ("POST", "/v1/equilibrium", b'{"composition": [{"name": "Na+", "value": ' + b"9" * 5000 + b', "unit": "mg/L"}]}',
     "application/json"),
    ("POST", "/v1/equilibrium", b"\x00\x01\x02", "application/json"),
    ("POST", "/v1/equilibrium", b"{}", "text/html"),
    ("POST", "/v1/dose", b'{"stream": {"composition": [{"name": "Na+", "value": 1, "unit": "mg/L"}]}, '
                         b'"reagent": {"name": "NoSuch"}, "setpoint_ph": 7}', "application/json"),
    ("GET", "/v1/nothing/../../../etc/passwd", b"", ""),
    ("DELETE", "/v1/equilibrium", b"", ""),
]


@pytest.mark.parametrize(("method", "path", "content", "ctype"), BAD_REQUESTS)
def test_no_error_answer_shows_a_trace_or_an_internal_path(
    client: TestClient, method: str, path: str, content: bytes, ctype: str
) -> None:
    r = client.request(method, path, content=content, headers={"content-type": ctype} if ctype else {})
    assert 400 <= r.status_code < 500, r.text[:300]
    for leak in LEAKS:
        assert leak not in r.text, leak


# ------------------------------------------------------------------ CORS


PREFLIGHT = {"Origin": "https://hmi.example", "Access-Control-Request-Method": "POST",
             "Access-Control-Request-Headers": "content-type, x-api-key"}


def test_cors_closed_by_default_grants_no_preflight_and_no_simple_request(client: TestClient) -> None:
    pre = client.options("/v1/equilibrium", headers=PREFLIGHT)
    assert pre.status_code == 405
    assert not [h for h in pre.headers if h.lower().startswith("access-control-")]
    r = client.post("/v1/equilibrium", json=SMALL, headers={"Origin": "https://hmi.example"})
    assert r.status_code == 200
    assert not [h for h in r.headers if h.lower().startswith("access-control-")]


def test_cors_configured_grants_only_the_listed_origin_post_and_get_no_credentials(make_client: AppFactory) -> None:
    c = make_client(cors_origins=("https://hmi.example",))
    pre = c.options("/v1/equilibrium", headers=PREFLIGHT)
    assert pre.status_code == 200
    assert pre.headers["access-control-allow-origin"] == "https://hmi.example"
    assert set(re.split(r",\s*", pre.headers["access-control-allow-methods"])) == {"GET", "POST"}
    assert "access-control-allow-credentials" not in pre.headers
    other = c.options("/v1/equilibrium", headers={**PREFLIGHT, "Origin": "https://evil.example"})
    assert other.status_code == 400 and "access-control-allow-origin" not in other.headers
    assert c.options("/v1/equilibrium", headers={**PREFLIGHT, "Access-Control-Request-Method": "DELETE"}).status_code == 400


# ------------------------------------------------------------------ pinned dependencies


def _pins() -> dict[str, str]:
    pins: dict[str, str] = {}
    for line in (ROOT / "constraints.txt").read_text(encoding="utf-8").splitlines():
        line = line.split("#", 1)[0].strip()
        if line:
            name, _, version = line.partition("==")
            assert version, f"constraints.txt: {line!r} is not an exact pin"
            pins[re.sub(r"[-_.]+", "-", name).lower()] = version
    return pins


def _requirements(extra: str | None = None) -> list[Requirement]:
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    raw = project["dependencies"] if extra is None else project["optional-dependencies"][extra]
    return [Requirement(r) for r in raw]


def _extras() -> list[str]:
    return sorted(tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
                  .get("optional-dependencies", {}))


@pytest.mark.parametrize("extra", [None, *_extras()])
def test_every_dependency_of_pyproject_is_pinned_in_constraints_within_its_range(extra: str | None) -> None:
    pins = _pins()
    for req in _requirements(extra):
        name = re.sub(r"[-_.]+", "-", req.name).lower()
        assert name in pins, f"{req.name} ({extra or 'runtime'}) has no pin in constraints.txt"
        assert req.specifier.contains(pins[name], prereleases=True), (req.name, str(req.specifier), pins[name])


def test_the_installed_runtime_dependencies_are_the_pinned_versions() -> None:
    pins = _pins()
    for req in _requirements():
        name = re.sub(r"[-_.]+", "-", req.name).lower()
        assert metadata.version(req.name) == pins[name], req.name


def test_every_install_command_uses_the_constraints_file() -> None:
    for path in (".ci/run", "deploy/Dockerfile", "README.md", "DEVELOPERS.md"):
        text = (ROOT / path).read_text(encoding="utf-8").replace("\\\n", " ")  # join continued lines
        installs = [line for line in text.splitlines() if re.search(r"pip install .*(-e |\.\[|\"\.)", line)]
        assert installs, path
        for line in installs:
            assert "-c constraints.txt" in line, (path, line)
