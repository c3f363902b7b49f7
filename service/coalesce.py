"""Coalesce concurrent single-stream solves into one vectorized core call.

``POST /v1/equilibrium`` costs the core a fixed few milliseconds per call, but only tens
of microseconds per stream inside a batch (``solve_many`` is vectorized and a stream's
answer does not depend on its batch). :class:`Coalescer` queues each request's
:class:`~models.stream.StreamSpec` and one collector task, whenever the solver thread is
free, takes everything queued (up to ``max_batch``) and solves it with ONE
``solve_many`` call in its own worker thread (one hand-off per group, not per
request: ``run_in_executor``, no anyio capacity limiter or cancel scope). While one
group is solved, new requests queue for the next (natural batching).

Before it takes a group the collector lets the event loop read what has already
arrived: it yields to the loop for as long as each loop step queues more requests (at
most ``collect_s`` and ``max_batch``). Clients answered together send their next
requests within a few milliseconds of each other; taken at once, the first of them was
solved alone, paying the call's whole fixed cost, while the rest queued behind it. Under
50 closed-loop clients this made groups of ~22 (up to 16 % of them a single request);
draining them first makes groups of ~47 and cut the solve CPU per request by a third
(``tests/benchmarks/bench_http.py``). A lone request waits one loop step.

Each request's future gets its own outcome: an ``EquilibriumResult``, a
``StreamFailure``, or an exception (a defect). When ``solve_many`` raises for a group,
the group is re-solved stream by stream so that a stream that raises fails alone; the
collector keeps running. Time budget, metrics and HTTP mapping stay with
:class:`service.solving.Solver`.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
from collections import deque
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from time import perf_counter

from models.results import EquilibriumResult, StreamFailure
from models.stream import StreamSpec
from service.problems import ProblemError

__all__ = ["Coalescer", "Outcome", "SolveMany"]

_log = logging.getLogger("protolyte.errors")

#: One stream's outcome: a result, a core failure, or the exception of a defect.
Outcome = EquilibriumResult | StreamFailure | BaseException
SolveMany = Callable[[Sequence[StreamSpec]], list[EquilibriumResult | StreamFailure]]


_get_running_loop = asyncio._get_running_loop  # None outside a loop (no exception to raise and catch)


def _stopping() -> ProblemError:
    return ProblemError(
        503,
        "The service is shutting down; retry on another instance or shortly.",
        slug="not-ready",
        headers={"Retry-After": "1"},
    )


def _expire(fut: asyncio.Future[Outcome]) -> None:
    if not fut.done():
        fut.set_exception(TimeoutError())


class Coalescer:
    """A queue of single-stream solves served by one collector task on the event loop."""

    def __init__(
        self,
        solve_many: SolveMany,
        max_batch: int = 256,
        on_group: Callable[[int], None] | None = None,
        collect_s: float = 0.02,
    ) -> None:
        """``on_group`` is told each group's size as it is handed to the solver thread;
        ``collect_s`` [s] bounds the wait for requests still arriving (0: take at once)."""
        if max_batch < 1:
            raise ValueError("max_batch must be >= 1")
        if not collect_s >= 0:
            raise ValueError("collect_s must be >= 0")
        self._solve_many = solve_many
        self._on_group = on_group
        self.max_batch = max_batch
        self.collect_s = collect_s
        self._pending: deque[tuple[StreamSpec, asyncio.Future[Outcome]]] = deque()
        self._inflight: list[asyncio.Future[Outcome]] = []
        self._wake: asyncio.Event | None = None
        self._task: asyncio.Task[None] | None = None
        self._loop: asyncio.AbstractEventLoop | None = None
        self._executor: ThreadPoolExecutor | None = None

    @property
    def running(self) -> bool:
        """True while the collector runs on the current event loop."""
        task = self._task
        if task is None or task.done():
            return False
        return _get_running_loop() is self._loop

    async def start(self) -> None:
        """Start the collector task on the running loop (in the app lifespan)."""
        if self.running:
            return
        self._loop = asyncio.get_running_loop()
        self._wake = asyncio.Event()
        if self._executor is None:
            self._executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="protolyte-coalescer")
        self._task = self._loop.create_task(self._collect(), name="protolyte-coalescer")

    async def stop(self) -> None:
        """Stop the collector; queued and in-flight requests are answered 503 (never hang)."""
        task, self._task = self._task, None
        if task is not None:
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task
        executor, self._executor = self._executor, None
        if executor is not None:  # a group still being solved is abandoned (its futures answered below)
            executor.shutdown(wait=False)
        for fut in self._inflight:
            if not fut.done():
                fut.set_exception(_stopping())
        self._inflight = []
        while self._pending:
            _, fut = self._pending.popleft()
            if not fut.done():
                fut.set_exception(_stopping())

    async def submit(self, spec: StreamSpec, timeout_s: float | None = None) -> EquilibriumResult | StreamFailure:
        """Queue ``spec`` and wait for its outcome; a defect's exception is re-raised here.

        After ``timeout_s`` [s] :class:`TimeoutError` is raised and the stream is dropped
        from the queue (or its result, if it is being solved, discarded). One timer on the
        loop, not a cancel scope: this runs for every single-stream request.
        """
        if not self.running or self._loop is None or self._wake is None:
            raise RuntimeError("the coalescer is not running on this event loop")
        fut: asyncio.Future[Outcome] = self._loop.create_future()
        self._pending.append((spec, fut))
        self._wake.set()
        timer = None if timeout_s is None else self._loop.call_later(timeout_s, _expire, fut)
        try:
            outcome = await fut
        finally:
            if timer is not None:
                timer.cancel()
        if isinstance(outcome, BaseException):
            raise outcome
        return outcome

    async def _let_arrive(self) -> None:
        """Yield to the event loop while each step queues more requests (see the module)."""
        if self.collect_s <= 0:
            return
        pending = self._pending
        deadline = perf_counter() + self.collect_s
        while len(pending) < self.max_batch:
            queued = len(pending)
            await asyncio.sleep(0)
            if len(pending) == queued or perf_counter() >= deadline:
                return

    def _take(self) -> list[tuple[StreamSpec, asyncio.Future[Outcome]]]:
        group: list[tuple[StreamSpec, asyncio.Future[Outcome]]] = []
        while self._pending and len(group) < self.max_batch:
            item = self._pending.popleft()
            if not item[1].done():  # skip requests that timed out or went away
                group.append(item)
        return group

    async def _collect(self) -> None:
        assert self._wake is not None and self._loop is not None and self._executor is not None
        loop, executor = self._loop, self._executor
        while True:
            await self._wake.wait()
            self._wake.clear()
            while True:
                await self._let_arrive()
                group = self._take()
                if not group:
                    break
                self._inflight = [fut for _, fut in group]
                specs = [spec for spec, _ in group]
                if self._on_group is not None:
                    self._on_group(len(specs))
                try:
                    outcomes = await loop.run_in_executor(executor, self._solve_group, specs)
                except Exception as exc:  # noqa: BLE001 -- a defect of the hop itself: fail this group only
                    _log.error("coalesced solve failed", extra={"error_type": type(exc).__name__})
                    outcomes = [exc] * len(specs)
                for fut, outcome in zip(self._inflight, outcomes):
                    if not fut.done():
                        fut.set_result(outcome)
                self._inflight = []

    def _solve_group(self, specs: list[StreamSpec]) -> list[Outcome]:
        """In a worker thread: one ``solve_many``; if it raises, each stream alone."""
        try:
            return self._checked(specs)
        except Exception as exc:  # noqa: BLE001 -- any defect: re-solve so it fails alone
            if len(specs) == 1:
                return [exc]
            _log.error(
                "coalesced solve of %d streams raised; solving them one by one",
                len(specs),
                extra={"error_type": type(exc).__name__},
            )
        outcomes: list[Outcome] = []
        for spec in specs:
            try:
                outcomes.extend(self._checked([spec]))
            except Exception as exc:  # noqa: BLE001 -- answered as that request's 500
                outcomes.append(exc)
        return outcomes

    def _checked(self, specs: list[StreamSpec]) -> list[Outcome]:
        results = self._solve_many(specs)
        if len(results) != len(specs):
            raise RuntimeError(f"core returned {len(results)} results for {len(specs)} streams")
        return list(results)
