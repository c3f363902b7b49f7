"""Coalescing of concurrent single-stream solves (``service.coalesce``, PROTOLYTE_COALESCE).

Concurrent ``POST /v1/equilibrium`` requests share one ``solve_many`` call; every
request still gets exactly the body the direct path gives, fails alone, keeps its time
budget, and shutdown with requests queued answers them instead of hanging.
"""

from __future__ import annotations

import asyncio
import copy
import threading
import time
from collections.abc import AsyncIterator, Sequence
from contextlib import asynccontextmanager
from typing import Any

import anyio
import httpx
import orjson
import pytest
from fastapi import FastAPI

from models import equilibrium, thermo
from models.results import EquilibriumResult, StreamFailure
from models.stream import StreamSpec
from service.app import create_app
from service.core import Core
from service.settings import Settings, SettingsError

from conftest import CREAMERY_STREAM, AppFactory

pytestmark = pytest.mark.anyio
DEFECT_T = 77.25  # a stream at this temperature makes the recording core raise (a defect)
UNKNOWN = {"composition": [{"name": "unobtainium", "value": 1.0, "unit": "mmol/L"}]}


@pytest.fixture
def anyio_backend() -> str:
    return "asyncio"


class Recorder:
    """A core around the real one that records each ``solve_many`` group (and can be slow)."""

    def __init__(self, delay_s: float = 0.0) -> None:
        self.delay_s = delay_s
        self.groups: list[int] = []
        self.single_calls = 0
        self._lock = threading.Lock()

    def solve(self, spec: StreamSpec) -> EquilibriumResult:
        with self._lock:
            self.single_calls += 1
        return equilibrium.solve(spec)

    def solve_many(self, specs: Sequence[StreamSpec]) -> list[EquilibriumResult | StreamFailure]:
        with self._lock:
            self.groups.append(len(specs))
        time.sleep(self.delay_s)
        if any(s.temperature_c == DEFECT_T for s in specs):
            raise RuntimeError("defect in the core at /srv/secret.py")
        return equilibrium.solve_many(specs)

    def core(self) -> Core:
        return Core(solve=self.solve, solve_many=self.solve_many, load_database=thermo.load_database)


@asynccontextmanager
async def serving(app: FastAPI) -> AsyncIterator[httpx.AsyncClient]:
    """The app with its lifespan entered, behind an in-process ASGI client."""
    async with app.router.lifespan_context(app):
        transport = httpx.ASGITransport(app=app, raise_app_exceptions=False)
        async with httpx.AsyncClient(transport=transport, base_url="http://testserver") as client:
            yield client


def variants(n: int) -> list[dict[str, Any]]:
    """``n`` distinct valid streams (the creamery stream at different temperatures)."""
    out = []
    for i in range(n):
        s = copy.deepcopy(CREAMERY_STREAM)
        s["temperature_c"] = 10.0 + i
        out.append(s)
    return out


async def post_all(client: httpx.AsyncClient, bodies: list[dict[str, Any]]) -> list[httpx.Response]:
    responses: list[httpx.Response | None] = [None] * len(bodies)

    async def one(i: int) -> None:
        responses[i] = await client.post("/v1/equilibrium", json=bodies[i], headers={"X-Request-ID": f"co-{i}"})

    async with anyio.create_task_group() as tg:
        for i in range(len(bodies)):
            tg.start_soon(one, i)
    return [r for r in responses if r is not None]


async def direct_answers(bodies: list[dict[str, Any]]) -> list[tuple[int, bytes]]:
    async with serving(create_app(Settings(coalesce=False))) as client:
        out = []
        for i, body in enumerate(bodies):
            r = await client.post("/v1/equilibrium", json=body, headers={"X-Request-ID": f"co-{i}"})
            out.append((r.status_code, r.content))
        return out


def same_to_round_off(got: Any, want: Any, key: str = "") -> bool:
    """Equal structure, strings and integers; floats equal to the core's batch round-off.

    ``solve_many`` promises a stream's answer does not depend on its batch to round-off
    (tests/test_core_properties.py: pH 1e-12, β 1e-6 relative); numpy's vector kernels
    can differ from a length-1 call in the last digit, so bytes may differ there.
    """
    if isinstance(want, dict):
        return isinstance(got, dict) and got.keys() == want.keys() and all(
            same_to_round_off(got[k], want[k], k) for k in want)
    if isinstance(want, list):
        return isinstance(got, list) and len(got) == len(want) and all(
            same_to_round_off(g, w, key) for g, w in zip(got, want))
    if isinstance(want, float) and not isinstance(want, bool):
        rel = 1e-6 if key == "buffer_capacity_mmol_l_per_ph" else 1e-9
        return isinstance(got, float) and got == pytest.approx(want, rel=rel, abs=1e-15)
    return type(got) is type(want) and got == want


async def test_64_concurrent_requests_are_coalesced_and_answer_as_the_direct_path() -> None:
    bodies = variants(60) + [UNKNOWN] + variants(3)
    expected = await direct_answers(bodies)
    rec = Recorder(delay_s=0.02)  # while one group is solved, the others queue
    app = create_app(Settings(), rec.core())
    async with serving(app) as client:
        responses = await post_all(client, bodies)
    assert [r.status_code for r in responses] == [code for code, _ in expected]
    assert responses[60].content == expected[60][1]  # the problem body: byte for byte
    for r, (_, want) in zip(responses, expected):
        assert r.headers["content-type"] == "application/json" or r.status_code != 200
        assert same_to_round_off(orjson.loads(r.content), orjson.loads(want))
    assert [r.headers["x-request-id"] for r in responses] == [f"co-{i}" for i in range(64)]
    assert sum(rec.groups) == 64 and max(rec.groups) > 1 and len(rec.groups) < 64
    assert rec.single_calls == 1  # the self-test only
    metrics = app.state.metrics.registry
    assert metrics.get_sample_value("protolyte_streams_solved_total") == 63
    assert metrics.get_sample_value("protolyte_solver_iterations_count") == 63
    assert metrics.get_sample_value("protolyte_solve_failures_total", {"reason": "invalid_input"}) == 1
    assert metrics.get_sample_value(
        "protolyte_http_requests_total", {"route": "/v1/equilibrium", "method": "POST", "status": "200"}
    ) == 63
    # every group the core saw is in the group-size histogram: how well coalescing works
    assert metrics.get_sample_value("protolyte_coalesced_group_size_count") == len(rec.groups)
    assert metrics.get_sample_value("protolyte_coalesced_group_size_sum") == 64
    assert metrics.get_sample_value("protolyte_coalesced_group_size_bucket", {"le": "1.0"}) == rec.groups.count(1)


async def test_a_bad_item_fails_alone_and_a_defect_is_a_500_for_its_request_only() -> None:
    bodies = variants(20)
    bodies[7] = UNKNOWN
    bodies[12]["temperature_c"] = DEFECT_T
    rec = Recorder(delay_s=0.01)
    async with serving(create_app(Settings(), rec.core())) as client:
        responses = await post_all(client, bodies)
        after = await client.post("/v1/equilibrium", json=bodies[0])  # the collector survived
    codes = [r.status_code for r in responses]
    assert codes == [422 if i == 7 else 500 if i == 12 else 200 for i in range(20)]
    assert responses[7].json()["type"] == "urn:protolyte:problem:input-error"
    assert responses[7].json()["errors"][0]["pointer"] == "/composition/0/name"
    defect = responses[12]
    assert defect.headers["content-type"] == "application/problem+json"
    assert defect.json()["instance"] == "co-12" and "/srv/" not in defect.text
    assert after.status_code == 200 and after.content == responses[0].content


def test_setting_off_uses_the_direct_path(make_client: AppFactory, stream: dict[str, Any]) -> None:
    off, on = Recorder(), Recorder()
    r_off = make_client(core=off.core(), coalesce=False).post("/v1/equilibrium", json=stream)
    r_on = make_client(core=on.core()).post("/v1/equilibrium", json=stream)
    assert r_off.status_code == r_on.status_code == 200 and r_off.content == r_on.content
    assert off.groups == [] and off.single_calls == 2  # self-test + the request
    assert on.groups == [1] and on.single_calls == 1


def test_the_environment_switches_coalescing() -> None:
    assert Settings.from_env({}).coalesce is True
    assert Settings.from_env({"PROTOLYTE_COALESCE": "0"}).coalesce is False
    assert Settings.from_env({"PROTOLYTE_COALESCE_MAX_BATCH": "8"}).coalesce_max_batch == 8
    with pytest.raises(SettingsError):
        Settings.from_env({"PROTOLYTE_COALESCE": "maybe"})
    with pytest.raises(SettingsError):
        Settings.from_env({"PROTOLYTE_COALESCE_MAX_BATCH": "0"})


async def test_the_time_budget_still_answers_503() -> None:
    rec = Recorder(delay_s=1.0)
    app = create_app(Settings(solve_time_budget_s=0.05), rec.core())
    async with serving(app) as client:
        start = time.perf_counter()
        responses = await post_all(client, variants(3))
        elapsed = time.perf_counter() - start
    assert elapsed < 0.9  # answered before the solve finished
    for r in responses:
        assert r.status_code == 503 and r.headers["retry-after"]
        assert r.json()["type"] == "urn:protolyte:problem:time-budget-exceeded"
        assert "PROTOLYTE_SOLVE_TIME_BUDGET_S" in r.json()["detail"]
    assert app.state.metrics.registry.get_sample_value(
        "protolyte_solve_failures_total", {"reason": "time_budget"}) == 3


async def test_shutdown_with_queued_requests_does_not_hang() -> None:
    rec = Recorder(delay_s=2.0)
    app = create_app(Settings(), rec.core())
    responses: list[httpx.Response] = []
    start = time.perf_counter()
    with anyio.fail_after(5):
        async with app.router.lifespan_context(app):
            transport = httpx.ASGITransport(app=app, raise_app_exceptions=False)
            client = httpx.AsyncClient(transport=transport, base_url="http://testserver")

            async def one(body: dict[str, Any]) -> None:
                responses.append(await client.post("/v1/equilibrium", json=body))

            tg = anyio.create_task_group()
            await tg.__aenter__()
            for body in variants(10):
                tg.start_soon(one, body)
            while not rec.groups:  # one group in flight, the rest queued
                await anyio.sleep(0.005)
        await tg.__aexit__(None, None, None)  # the lifespan has stopped the coalescer
        await client.aclose()
    assert time.perf_counter() - start < 1.5
    assert len(responses) == 10
    for r in responses:
        assert r.status_code == 503 and r.json()["type"] == "urn:protolyte:problem:not-ready"


def _spec() -> StreamSpec:
    from service.convert import to_spec
    from service.schemas import Stream

    return to_spec(Stream.model_validate(CREAMERY_STREAM))


async def _arriving(coalescer: Any, n: int, *, steps_apart: int = 1) -> list[Any]:
    """``n`` requests submitted one per ``steps_apart`` event-loop steps, as clients answered
    together send their next requests; their outcomes once all are answered."""
    spec = _spec()
    tasks = []
    for _ in range(n):
        tasks.append(asyncio.ensure_future(coalescer.submit(spec)))
        for _ in range(steps_apart):
            await asyncio.sleep(0)
    return list(await asyncio.gather(*tasks))


async def _with_coalescer(rec: Recorder, collect_s: float, n: int, steps_apart: int = 1) -> list[Any]:
    from service.coalesce import Coalescer

    coalescer = Coalescer(rec.solve_many, max_batch=256, collect_s=collect_s)
    await coalescer.start()
    try:
        return await _arriving(coalescer, n, steps_apart=steps_apart)
    finally:
        await coalescer.stop()


async def test_requests_arriving_over_a_few_loop_steps_are_solved_in_one_call() -> None:
    rec = Recorder()
    outcomes = await _with_coalescer(rec, collect_s=0.5, n=12)
    assert rec.groups == [12]
    assert all(isinstance(o, EquilibriumResult) for o in outcomes)


async def test_without_a_wait_the_first_arrival_is_solved_alone() -> None:
    rec = Recorder()
    await _with_coalescer(rec, collect_s=0.0, n=12)
    assert rec.groups[0] == 1 and sum(rec.groups) == 12


async def test_the_wait_ends_when_a_loop_step_brings_nothing_new() -> None:
    rec = Recorder()
    await _with_coalescer(rec, collect_s=0.5, n=6, steps_apart=3)  # gaps of 3 steps: no company
    assert rec.groups[0] == 1 and sum(rec.groups) == 6


async def test_the_wait_is_bounded_by_collect_s() -> None:
    from service.coalesce import Coalescer

    rec = Recorder()
    coalescer = Coalescer(rec.solve_many, max_batch=100_000, collect_s=0.005)
    await coalescer.start()
    spec = _spec()
    tasks = []
    start = time.perf_counter()
    try:
        while not rec.groups:  # a request every loop step, without end: only the bound stops the wait
            tasks.append(asyncio.ensure_future(coalescer.submit(spec)))
            await asyncio.sleep(0)
            assert time.perf_counter() - start < 2.0, "the collector never took a group"
        await asyncio.gather(*tasks)
    finally:
        await coalescer.stop()
    assert rec.groups[0] < len(tasks)


def test_the_wait_is_a_setting_in_milliseconds() -> None:
    assert Settings.from_env({}).coalesce_wait_ms == 20.0
    assert Settings.from_env({"PROTOLYTE_COALESCE_WAIT_MS": "0"}).coalesce_wait_ms == 0.0
    for bad in ("-1", "soon", "nan", "5000"):
        with pytest.raises(SettingsError, match="(?i)coalesce_wait_ms"):
            Settings.from_env({"PROTOLYTE_COALESCE_WAIT_MS": bad})
