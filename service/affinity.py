"""One CPU per worker process, when the deployment asks for it (``PROTOLYTE_CPU_AFFINITY``).

A worker runs Python on one core at a time (the GIL), in two busy threads: the event
loop and the coalesced-solve thread (:mod:`service.coalesce`). Left to the scheduler,
the two are woken on different cores, and every hand-over of the GIL then crosses
cores (a wake-up of an idle core, cold caches). Pinned to one core, the same worker
answered 1.15-1.45x the single-stream requests per second, with a lower p99
(``tests/benchmarks/bench_http.py``, README "Performance").

Pinning is off by default: it only pays when the worker's core is its own (a dedicated
host, or Kubernetes' static CPU manager with integer CPU requests). Where many
processes share a pool of cores, pinned workers of different pods can land on the same
core while others idle.

Values: ``off`` (default; the scheduler decides), ``auto`` (worker *i* gets the *i*-th
CPU this process may run on) or a comma-separated list of CPU numbers (worker *i* gets
the *i*-th, cycling). Linux only (``os.sched_setaffinity``).
"""

from __future__ import annotations

import logging
import os
from collections.abc import Collection
from pathlib import Path

__all__ = [
    "AUTO", "OFF", "AffinityError", "check_cpu_affinity", "free_slot", "parse_cpu_affinity", "pin_worker", "worker_cpu",
]

OFF = "off"
AUTO = "auto"

_log = logging.getLogger("protolyte.affinity")


class AffinityError(ValueError):
    """``PROTOLYTE_CPU_AFFINITY`` cannot be honoured on this machine."""


def parse_cpu_affinity(raw: str) -> str:
    """The setting in its normal form (``off``, ``auto`` or ``"0,2"``); ValueError otherwise."""
    value = raw.strip().lower()
    if value in ("", OFF):
        return OFF
    if value == AUTO:
        return AUTO
    cpus: list[int] = []
    for part in value.split(","):
        part = part.strip()
        if not part.isdigit():
            raise ValueError(f"must be 'off', 'auto' or CPU numbers like '0,2', got {raw!r}")
        cpu = int(part)
        if cpu in cpus:
            raise ValueError(f"lists CPU {cpu} twice: {raw!r}")
        cpus.append(cpu)
    return ",".join(map(str, cpus))


def worker_cpu(setting: str, index: int, allowed: Collection[int]) -> int | None:
    """The CPU of worker ``index`` (0-based) under ``setting``, or ``None`` when ``off``.

    ``allowed`` is the set of CPUs this process may run on; a listed CPU outside it is
    an :class:`AffinityError` naming it."""
    if setting == OFF:
        return None
    if not allowed:
        raise AffinityError("this process may run on no CPU at all")
    if setting == AUTO:
        cpus = sorted(allowed)
    else:
        cpus = [int(c) for c in setting.split(",")]
        missing = [c for c in cpus if c not in allowed]
        if missing:
            raise AffinityError(
                f"PROTOLYTE_CPU_AFFINITY lists CPU {', '.join(map(str, missing))}, which this process "
                f"may not run on (allowed: {', '.join(map(str, sorted(allowed)))})"
            )
    return cpus[index % len(cpus)]


def free_slot(taken: Collection[int | None]) -> int:
    """The lowest worker slot not in ``taken``: a replacement worker gets the CPU of the
    worker it replaces, not the next one along."""
    slot = 0
    while slot in taken:
        slot += 1
    return slot


def _allowed() -> set[int]:
    if not hasattr(os, "sched_setaffinity"):
        raise AffinityError("PROTOLYTE_CPU_AFFINITY needs Linux (os.sched_setaffinity)")
    return os.sched_getaffinity(0)


def check_cpu_affinity(setting: str) -> None:
    """Raise :class:`AffinityError` now (in the master) when no worker could be pinned as
    ``setting`` says (every listed CPU is checked whichever worker it goes to)."""
    if setting != OFF:
        worker_cpu(setting, 0, _allowed())


def _pin_process(cpu: int) -> None:
    """Every thread of this process, and any it starts later, onto ``cpu``."""
    tasks = Path("/proc/self/task")
    tids = [int(t.name) for t in tasks.iterdir()] if tasks.is_dir() else [0]
    for tid in tids:  # threads started later inherit the affinity of the thread starting them
        try:
            os.sched_setaffinity(tid, {cpu})
        except ProcessLookupError:  # that thread ended meanwhile
            continue


def pin_worker(setting: str, index: int) -> int | None:
    """Pin this worker process (number ``index``) as ``setting`` says; the CPU, or ``None``."""
    if setting == OFF:
        return None
    cpu = worker_cpu(setting, index, _allowed())
    assert cpu is not None
    _pin_process(cpu)
    _log.info("worker %d pinned to CPU %d (PROTOLYTE_CPU_AFFINITY)", index, cpu)
    return cpu
