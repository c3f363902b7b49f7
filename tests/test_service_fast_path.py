"""The fast path of POST /v1/equilibrium answers exactly as the full app does.

Every request here is sent to two apps, one with the fast path (the default) and one
with ``fast_path=False``; status, headers (but the fresh request id) and body must be
the same, for valid streams and for every kind of refusal. Other tests check that a
valid request really takes the fast path, and that core errors and defects met on it
are answered by the app's own handlers.
"""

from __future__ import annotations

import copy
import json
from collections.abc import Callable, Sequence
from typing import Any

import pytest
from conftest import CREAMERY_STREAM, AppFactory
from fastapi.testclient import TestClient

from models.errors import InputError, SolveError
from service import fastpath
from service.core import Core, default_core

PATH = "/v1/equilibrium"
JSON = {"content-type": "application/json"}
SIMPLE = {"composition": [{"name": "Na+", "value": 2.0, "unit": "mmol/L"},
                          {"name": "Cl-", "value": 1.0, "unit": "mmol/L"},
                          {"name": "carbonate", "value": 1.0, "unit": "mmol/L"}]}


def _with(**changes: Any) -> str:
    body = copy.deepcopy(CREAMERY_STREAM)
    body.update(changes)
    return json.dumps(body)


#: (name, body bytes or text, headers)
CASES: list[tuple[str, Any, dict[str, str]]] = [
    ("creamery", json.dumps(CREAMERY_STREAM), JSON),
    ("simple", json.dumps(SIMPLE), JSON),
    ("charset", json.dumps(SIMPLE), {"content-type": "application/json; charset=utf-8"}),
    ("upper-case-type", json.dumps(SIMPLE), {"content-type": "Application/JSON"}),
    ("problem-json-type", json.dumps(SIMPLE), {"content-type": "application/merge-patch+json"}),
    ("text-plain", json.dumps(SIMPLE), {"content-type": "text/plain"}),
    ("no-type", json.dumps(SIMPLE), {}),
    ("empty", "", JSON),
    ("malformed", '{"composition": [', JSON),
    ("array", "[]", JSON),
    ("string", '"x"', JSON),
    ("nan-literal", _with(temperature_c=0).replace('"temperature_c": 0', '"temperature_c": NaN'), JSON),
    ("too-hot", _with(temperature_c=150.0), JSON),
    ("string-number", _with(temperature_c="25"), JSON),
    ("bool-number", _with(temperature_c=True), JSON),
    ("unknown-field", _with(colour="brown"), JSON),
    ("bad-unit", json.dumps({"composition": [{"name": "Na+", "value": 1.0, "unit": "furlongs"}]}), JSON),
    ("duplicate-name", json.dumps({"composition": [SIMPLE["composition"][0]] * 2}), JSON),
    ("balance-without-ph", _with(balance_on="Na+"), JSON),
    ("pka-order", _with(custom_systems=[{"name": "whey_acid", "pka": [5.6, 4.2], "top_charge": 0}]), JSON),
    ("unknown-species", json.dumps({"composition": [{"name": "Zz+", "value": 1.0, "unit": "mmol/L"}]}), JSON),
    ("duplicate-key-last-wins", '{"composition": [], "composition": ' + json.dumps(SIMPLE["composition"]) + "}", JSON),
    ("duplicate-key-bad-last", json.dumps(SIMPLE)[:-1] + ', "temperature_c": 25.0, "temperature_c": 500.0}', JSON),
    ("bad-utf8", b'{"composition": [{"name": "Na\xff", "value": 1.0, "unit": "mmol/L"}]}', JSON),
    ("huge-int", _with(temperature_c=10**30), JSON),
]


def _pair(make_client: AppFactory, **settings: Any) -> tuple[TestClient, TestClient]:
    return make_client(**settings), make_client(fast_path=False, **settings)


def _same(a: Any, b: Any) -> None:
    assert a.status_code == b.status_code, (a.status_code, b.status_code, a.text, b.text)
    ha = {k: v for k, v in a.headers.items() if k != "x-request-id"}
    hb = {k: v for k, v in b.headers.items() if k != "x-request-id"}
    assert ha == hb
    if a.headers.get("content-type", "").endswith("json") and a.content:
        ja, jb = a.json(), b.json()
        if isinstance(ja, dict) and "instance" in ja:
            assert ja.pop("instance") == a.headers["x-request-id"]
            assert jb.pop("instance") == b.headers["x-request-id"]
        assert ja == jb
    else:
        assert a.content == b.content


@pytest.mark.parametrize(("name", "body", "headers"), CASES, ids=[c[0] for c in CASES])
def test_the_fast_path_answers_as_the_full_app(
    make_client: AppFactory, name: str, body: Any, headers: dict[str, str]
) -> None:
    fast, full = _pair(make_client)
    _same(fast.post(PATH, content=body, headers=headers), full.post(PATH, content=body, headers=headers))


@pytest.mark.parametrize(
    ("key", "status"), [(None, 401), ("wrong", 401), ("s3cret", 200)], ids=["missing", "wrong", "right"]
)
def test_the_api_key_is_checked_as_by_the_full_app(make_client: AppFactory, key: str | None, status: int) -> None:
    fast, full = _pair(make_client, api_key="s3cret")
    headers = {**JSON, **({"X-API-Key": key} if key else {})}
    a = fast.post(PATH, content=json.dumps(SIMPLE), headers=headers)
    _same(a, full.post(PATH, content=json.dumps(SIMPLE), headers=headers))
    assert a.status_code == status


@pytest.mark.parametrize("sent", [b"\xc3\xa9", b"\xe9"], ids=["utf-8-bytes", "latin-1-byte"])
def test_a_non_ascii_api_key_is_compared_as_by_the_full_app(make_client: AppFactory, sent: bytes) -> None:
    fast, full = _pair(make_client, api_key="\u00e9")
    headers = {"content-type": "application/json", "x-api-key": sent}
    _same(fast.post(PATH, content=json.dumps(SIMPLE), headers=headers),  # type: ignore[arg-type]
          full.post(PATH, content=json.dumps(SIMPLE), headers=headers))  # type: ignore[arg-type]


def test_a_body_over_the_limit_is_refused_as_by_the_full_app(make_client: AppFactory) -> None:
    fast, full = _pair(make_client, body_limit_bytes=100)
    body = json.dumps(CREAMERY_STREAM)
    a = fast.post(PATH, content=body, headers=JSON)
    _same(a, full.post(PATH, content=body, headers=JSON))
    assert a.status_code == 413


def test_a_chunked_body_is_read_whole_by_the_full_app(make_client: AppFactory) -> None:
    fast, full = _pair(make_client)
    body = json.dumps(SIMPLE).encode()
    parts = [body[:10], body[10:]]
    _same(fast.post(PATH, content=iter(parts), headers=JSON), full.post(PATH, content=iter(parts), headers=JSON))


def test_cors_requests_take_the_full_app(make_client: AppFactory) -> None:
    fast, full = _pair(make_client, cors_origins=("https://hmi.example",))
    headers = {**JSON, "Origin": "https://hmi.example"}
    a = fast.post(PATH, content=json.dumps(SIMPLE), headers=headers)
    _same(a, full.post(PATH, content=json.dumps(SIMPLE), headers=headers))
    assert a.headers["access-control-allow-origin"] == "https://hmi.example"


def _count_calls(monkeypatch: pytest.MonkeyPatch, method: str) -> list[int]:
    """A list that gets a 1 each time ``EquilibriumFastPath.<method>`` is called."""
    calls: list[int] = []
    original = getattr(fastpath.EquilibriumFastPath, method)

    async def counted(self: Any, *args: Any) -> None:
        calls.append(1)
        await original(self, *args)

    monkeypatch.setattr(fastpath.EquilibriumFastPath, method, counted)
    return calls


def test_a_valid_request_takes_the_fast_path_and_is_logged_and_counted(
    make_client: AppFactory, monkeypatch: pytest.MonkeyPatch
) -> None:
    calls = _count_calls(monkeypatch, "_fallback")
    client = make_client()
    r = client.post(PATH, content=json.dumps(CREAMERY_STREAM), headers={**JSON, "X-Request-ID": "plc-7.tank_3"})
    assert r.status_code == 200 and r.headers["x-request-id"] == "plc-7.tank_3"
    assert calls == []
    metrics = client.get("/metrics").text
    assert 'protolyte_http_requests_total{method="POST",route="/v1/equilibrium",status="200"} 1.0' in metrics
    assert "protolyte_streams_solved_total 1.0" in metrics
    assert client.post(PATH, content=_with(temperature_c=150.0), headers=JSON).status_code == 422
    assert calls == [1]


def test_with_native_telemetry_on_requests_take_the_full_stack(
    make_client: AppFactory, monkeypatch: pytest.MonkeyPatch
) -> None:
    served = _count_calls(monkeypatch, "serve")
    client = make_client()
    app = client.app
    assert client.post(PATH, content=json.dumps(CREAMERY_STREAM), headers=JSON).status_code == 200
    assert served == [1]
    monkeypatch.setattr(app._native_telemetry, "enabled", lambda: True)  # a provider set up later
    monkeypatch.setattr(app, "_telemetry_read_at", app._telemetry_read_at - app.TELEMETRY_RECHECK_S)
    r = client.post(PATH, content=json.dumps(CREAMERY_STREAM), headers=JSON)
    assert r.status_code == 200
    assert served == [1]  # seen once the reading is older than TELEMETRY_RECHECK_S: FastAPI's own path


def _core_raising(exc: Exception) -> Core:
    real = default_core()

    def solve_many(specs: Sequence[Any]) -> list[Any]:
        raise exc

    def solve(spec: Any) -> Any:
        if spec.temperature_c == 31.5:  # the creamery stream; the self-test solves for real
            raise exc
        return real.solve(spec)

    return Core(solve=solve, solve_many=solve_many, load_database=real.load_database)


@pytest.mark.parametrize("coalesce", [True, False], ids=["coalesced", "alone"])
@pytest.mark.parametrize(
    "exc", [InputError("whey_acid is not defined", "/composition/7/name"), SolveError("no root", "no_convergence")],
    ids=["input-error", "solve-error"],
)
def test_core_errors_on_the_fast_path_are_the_same_problems(
    make_client: AppFactory, exc: Exception, coalesce: bool
) -> None:
    core = _core_raising(exc)
    fast = make_client(core=core, coalesce=coalesce)
    full = make_client(core=core, coalesce=coalesce, fast_path=False)
    a = fast.post(PATH, content=json.dumps(CREAMERY_STREAM), headers=JSON)
    _same(a, full.post(PATH, content=json.dumps(CREAMERY_STREAM), headers=JSON))
    assert a.status_code == 422


def test_a_defect_on_the_fast_path_is_a_bare_500(make_client: AppFactory) -> None:
    core = _core_raising(RuntimeError("a bug in the core"))
    fast = make_client(core=core, coalesce=False, raise_server_exceptions=False)
    full = make_client(core=core, coalesce=False, fast_path=False, raise_server_exceptions=False)
    a = fast.post(PATH, content=json.dumps(CREAMERY_STREAM), headers=JSON)
    _same(a, full.post(PATH, content=json.dumps(CREAMERY_STREAM), headers=JSON))
    assert a.status_code == 500 and "a bug" not in a.text


def test_a_solve_over_the_time_budget_is_the_same_prompt_503(make_client: AppFactory) -> None:
    import time

    real = default_core()

    def slow_many(specs: Sequence[Any]) -> list[Any]:
        time.sleep(0.3)
        return real.solve_many(specs)

    core = Core(solve=real.solve, solve_many=slow_many, load_database=real.load_database)
    fast = make_client(core=core, solve_time_budget_s=0.05)
    full = make_client(core=core, solve_time_budget_s=0.05, fast_path=False)
    a = fast.post(PATH, content=json.dumps(SIMPLE), headers=JSON)
    _same(a, full.post(PATH, content=json.dumps(SIMPLE), headers=JSON))
    assert a.status_code == 503 and a.json()["type"].endswith("time-budget-exceeded")
    assert a.headers["retry-after"] == "1"


@pytest.mark.parametrize("failing", [False, True], ids=["solved", "core-error"])
def test_the_fast_path_logs_and_counts_once_with_the_request_id(
    make_client: AppFactory, access_lines: Callable[[], list[dict[str, Any]]], failing: bool
) -> None:
    core = _core_raising(SolveError("no root", "no_convergence")) if failing else None
    client = make_client(core=core) if failing else make_client()
    r = client.post(PATH, content=json.dumps(CREAMERY_STREAM), headers={**JSON, "X-Request-ID": "edge-1"})
    fresh = client.post(PATH, content=json.dumps(CREAMERY_STREAM), headers=JSON)
    status = 422 if failing else 200
    assert r.status_code == status and r.headers["x-request-id"] == "edge-1"
    assert len(fresh.headers["x-request-id"]) == 32
    lines = access_lines()
    assert [(x["request_id"], x["route"], x["method"], x["status"]) for x in lines] == [
        ("edge-1", PATH, "POST", status), (fresh.headers["x-request-id"], PATH, "POST", status)
    ]
    assert all(x["duration_seconds"] > 0 and "batch_size" not in x for x in lines)
    metrics = client.get("/metrics").text
    assert f'protolyte_http_requests_total{{method="POST",route="/v1/equilibrium",status="{status}"}} 2.0' in metrics
    assert 'protolyte_http_request_duration_seconds_count{method="POST",route="/v1/equilibrium"} 2.0' in metrics
