"""Run core solves under the time budget and record their metrics.

The solve runs in a worker thread; when it outlives ``budget_s`` the request is
answered 503 at once and the thread is abandoned (the core's iteration cap bounds it).
With a running :class:`service.coalesce.Coalescer`, single-stream solves are queued and
solved together in one vectorized call, under the same budget, metrics and errors.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import TypeVar

import anyio
import anyio.to_thread

from models.errors import InputError, ProtolyteError, SolveError, UnreachableSetpoint
from models.results import EquilibriumResult, StreamFailure
from models.stream import StreamSpec
from service.coalesce import Coalescer
from service.core import Core
from service.metrics import Metrics
from service.problems import ProblemError

__all__ = ["Solver", "failure_error", "failure_reason"]

T = TypeVar("T")


def failure_reason(exc: ProtolyteError) -> str:
    """The metrics reason code of a core exception."""
    if isinstance(exc, SolveError):
        return exc.reason
    if isinstance(exc, UnreachableSetpoint):
        return "unreachable_setpoint"
    if isinstance(exc, InputError):
        return "invalid_input"
    return "other"


def failure_error(failure: StreamFailure) -> ProtolyteError:
    """The exception ``core.solve`` raises for this failure of ``core.solve_many``."""
    if failure.kind == "input":
        return InputError(failure.message, failure.field)
    return SolveError(failure.message, failure.reason)


class Solver:
    """Core calls with a time budget and metrics."""

    def __init__(
        self, core: Core, metrics: Metrics, budget_s: float, coalescer: Coalescer | None = None
    ) -> None:
        self.core = core
        self.metrics = metrics
        self.budget_s = budget_s
        self.coalescer = coalescer

    async def call(self, fn: Callable[[], T], what: str) -> T:
        """Run ``fn`` in a worker thread under the time budget; core errors are counted and re-raised."""

        def run() -> T:
            try:
                return fn()
            except ProtolyteError as exc:
                self.metrics.observe_failure(failure_reason(exc))
                raise

        return await self._run(run, what)

    def _over_budget(self, what: str) -> ProblemError:
        self.metrics.observe_failure("time_budget")
        return ProblemError(
            503,
            f"The {what} did not finish within this server's time budget of "
            f"{self.budget_s:g} s (PROTOLYTE_SOLVE_TIME_BUDGET_S); retry later or send fewer items.",
            slug="time-budget-exceeded",
            headers={"Retry-After": "1"},
        )

    async def _run(self, fn: Callable[[], T], what: str) -> T:
        try:
            with anyio.fail_after(self.budget_s):
                return await anyio.to_thread.run_sync(fn, abandon_on_cancel=True)
        except TimeoutError:
            raise self._over_budget(what) from None

    async def _coalesced(self, coalescer: Coalescer, spec: StreamSpec) -> EquilibriumResult:
        try:
            outcome = await coalescer.submit(spec, self.budget_s)
        except TimeoutError:
            raise self._over_budget("solve") from None
        if isinstance(outcome, StreamFailure):
            exc = failure_error(outcome)
            self.metrics.observe_failure(failure_reason(exc))
            raise exc
        self.metrics.observe_solved(outcome.iterations)
        return outcome

    async def solve(self, spec: StreamSpec) -> EquilibriumResult:
        """Solve one stream; core errors propagate (mapped to 422 by the problem handlers)."""
        if self.coalescer is not None and self.coalescer.running:
            return await self._coalesced(self.coalescer, spec)

        def run() -> EquilibriumResult:
            try:
                result = self.core.solve(spec)
            except ProtolyteError as exc:
                self.metrics.observe_failure(failure_reason(exc))
                raise
            self.metrics.observe_solved(result.iterations)
            return result

        return await self._run(run, "solve")

    async def solve_many(self, specs: Sequence[StreamSpec]) -> list[EquilibriumResult | StreamFailure]:
        """Solve a batch in one vectorized core call; failures stay in place."""

        def run() -> list[EquilibriumResult | StreamFailure]:
            results = self.core.solve_many(specs)
            if len(results) != len(specs):
                raise RuntimeError(f"core returned {len(results)} results for {len(specs)} streams")
            for r in results:
                if isinstance(r, StreamFailure):
                    self.metrics.observe_failure(r.reason or r.kind)
                else:
                    self.metrics.observe_solved(r.iterations)
            return results

        self.metrics.batch_size.observe(len(specs))
        return await self._run(run, "batch solve")
