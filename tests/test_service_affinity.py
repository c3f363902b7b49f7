"""PROTOLYTE_CPU_AFFINITY: one CPU per worker process, off unless asked (service.affinity).

Pinning is checked in a child interpreter (never in the test runner itself) with the
real system calls; Linux only, as the feature."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from service.affinity import AffinityError, free_slot, parse_cpu_affinity, worker_cpu
from service.settings import Settings, SettingsError

ROOT = Path(__file__).resolve().parents[1]
linux_only = pytest.mark.skipif(not hasattr(os, "sched_setaffinity"), reason="CPU affinity is Linux only")


@pytest.mark.parametrize(
    ("raw", "normal"),
    [("", "off"), ("off", "off"), (" OFF ", "off"), ("auto", "auto"), ("Auto", "auto"), ("3", "3"), (" 1 , 0 ", "1,0")],
)
def test_the_setting_is_read_in_its_normal_form(raw: str, normal: str) -> None:
    assert parse_cpu_affinity(raw) == normal
    assert Settings.from_env({"PROTOLYTE_CPU_AFFINITY": raw}).cpu_affinity == normal


def test_pinning_is_off_by_default() -> None:
    assert Settings.from_env({}).cpu_affinity == "off"


@pytest.mark.parametrize("raw", ["on", "-1", "1,,2", "auto,1", "1;2", "2,2"])
def test_a_setting_that_is_not_cpus_is_refused_naming_the_variable(raw: str) -> None:
    with pytest.raises(SettingsError, match="PROTOLYTE_CPU_AFFINITY") as err:
        Settings.from_env({"PROTOLYTE_CPU_AFFINITY": raw})
    assert repr(raw.strip().lower()) in str(err.value) or repr(raw) in str(err.value)


def test_auto_gives_worker_i_the_ith_allowed_cpu_cycling() -> None:
    allowed = {5, 1, 3}
    assert [worker_cpu("auto", i, allowed) for i in range(4)] == [1, 3, 5, 1]


def test_a_list_gives_workers_its_cpus_in_turn() -> None:
    assert [worker_cpu("3,1", i, {0, 1, 2, 3}) for i in range(3)] == [3, 1, 3]


def test_off_pins_nothing() -> None:
    assert worker_cpu("off", 0, {0, 1}) is None


def test_a_cpu_the_process_may_not_use_is_named() -> None:
    with pytest.raises(AffinityError, match=r"CPU 7, which this process may not run on \(allowed: 0, 1\)"):
        worker_cpu("0,7", 0, {0, 1})


def test_a_new_worker_takes_the_lowest_free_slot() -> None:
    # gunicorn_conf.pre_fork passes the live workers' slots (imported here it would set up
    # the multiprocess metrics directory for the whole test session)
    assert free_slot({0, 2}) == 1  # the slot of the worker that died, not a third CPU
    assert free_slot({0, 1}) == 2
    assert free_slot(set()) == 0


_CHILD = """
import os, threading
from service.affinity import pin_worker
before = threading.Event(); stop = threading.Event()
seen = {}
def early():
    before.set(); stop.wait(); seen["early"] = os.sched_getaffinity(0)
t = threading.Thread(target=early); t.start(); before.wait()
cpu = pin_worker("auto", int(os.environ["INDEX"]))
late = threading.Thread(target=lambda: seen.__setitem__("late", os.sched_getaffinity(0))); late.start(); late.join()
stop.set(); t.join()
print(cpu, sorted(os.sched_getaffinity(0)), sorted(seen["early"]), sorted(seen["late"]))
"""


@linux_only
def test_a_pinned_worker_runs_every_thread_on_its_one_cpu() -> None:
    allowed = sorted(os.sched_getaffinity(0))
    index = 1
    out = subprocess.run(
        [sys.executable, "-c", _CHILD], cwd=ROOT, env={**os.environ, "INDEX": str(index)},
        capture_output=True, text=True, timeout=60, check=True,
    ).stdout.split(maxsplit=1)
    cpu = allowed[index % len(allowed)]
    assert int(out[0]) == cpu
    # the main thread, a thread started before pinning and one started after: all on that CPU
    assert out[1].strip() == f"[{cpu}] [{cpu}] [{cpu}]"


@linux_only
def test_serve_refuses_a_cpu_it_may_not_use() -> None:
    absent = max(os.sched_getaffinity(0)) + 1000
    done = subprocess.run(
        [sys.executable, "-m", "service.cli", "serve", "--port", "1", "--cpu-affinity", str(absent)],
        cwd=ROOT, env={**os.environ, "PROTOLYTE_LOG_LEVEL": "WARNING"}, capture_output=True, text=True, timeout=60, check=False,
    )
    assert done.returncode == 2
    assert f"lists CPU {absent}, which this process may not run on" in done.stderr
