"""The real server as deployed: several worker processes, shared metrics, graceful stop.

These start ``protolyte serve`` as a subprocess on a free 127.0.0.1 port (loopback only),
bound every wait, and kill the process group in ``finally``. They are ordinary tests
(no marker, not ``slow``): CI runs them. Each takes well under 30 s on 2 cores.

* Two gunicorn workers: requests until both worker PIDs have served (read per PID from
  the prometheus_client multiprocess files, ``counter_<pid>.db``), then /metrics, served
  by either worker, reports the total across both.
* SIGTERM while a 10 000-stream batch is in flight: the batch still completes with 200,
  under gunicorn (the container's default) and under the single uvicorn process that
  each Kubernetes pod runs (with PROMETHEUS_MULTIPROC_DIR set, as the ConfigMap does).
"""

from __future__ import annotations

import http.client
import json
import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

try:
    import service.app  # noqa: F401
    import service.cli  # noqa: F401
except ImportError as exc:  # the service is written in parallel with deploy/
    pytest.skip(f"service not importable yet: {exc}", allow_module_level=True)

from prometheus_client.multiprocess import MultiProcessCollector
from prometheus_client.parser import text_string_to_metric_families

ROOT = Path(__file__).resolve().parents[1]
PROMTOOL = shutil.which("promtool")
READY_TIMEOUT_S = 30.0


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _children(pid: int) -> set[int]:
    kids = set()
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        if int(stat.rsplit(")", 1)[1].split()[1]) == pid:
            kids.add(int(entry.name))
    return kids


def _request(port: int, method: str, path: str, body: bytes | None = None,
             timeout: float = 10.0) -> tuple[int, bytes]:
    """One request on a fresh connection (so the kernel can hand it to any worker)."""
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=timeout)
    try:
        headers = {"Connection": "close"}
        if body is not None:
            headers["Content-Type"] = "application/json"
        conn.request(method, path, body=body, headers=headers)
        resp = conn.getresponse()
        return resp.status, resp.read()
    finally:
        conn.close()


@contextmanager
def running_server(tmp_path: Path, workers: int, **env_extra: str) -> Iterator[tuple[subprocess.Popen[bytes], int, Path]]:
    """``protolyte serve --workers N`` on a free loopback port, ready; killed at exit."""
    port = _free_port()
    metrics_dir = tmp_path / "metrics"
    env = {
        **os.environ,
        "PROTOLYTE_LOG_LEVEL": "WARNING",
        "PROMETHEUS_MULTIPROC_DIR": str(metrics_dir),
        "OMP_NUM_THREADS": "1",
        "OPENBLAS_NUM_THREADS": "1",
        **env_extra,
    }
    env.pop("PROTOLYTE_API_KEY", None)
    # As in the container image: its GUNICORN_CMD_ARGS (graceful and worker timeouts).
    env["GUNICORN_CMD_ARGS"] = _dockerfile_env("GUNICORN_CMD_ARGS")
    cmd = [sys.executable, "-m", "service.cli", "serve", "--workers", str(workers),
           "--host", "127.0.0.1", "--port", str(port)]
    log = open(tmp_path / "server.log", "wb")  # noqa: SIM115
    proc = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
    try:
        deadline = time.monotonic() + READY_TIMEOUT_S
        while True:
            if proc.poll() is not None:
                raise AssertionError(f"server exited with {proc.returncode}:\n{_log(tmp_path)}")
            try:
                if _request(port, "GET", "/readyz", timeout=2)[0] == 200:
                    break
            except OSError:
                pass
            if time.monotonic() > deadline:
                raise AssertionError(f"not ready within {READY_TIMEOUT_S} s:\n{_log(tmp_path)}")
            time.sleep(0.1)
        yield proc, port, metrics_dir
    finally:
        if proc.poll() is None:
            try:
                os.killpg(proc.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
        proc.wait(timeout=10)
        log.close()


def _log(tmp_path: Path) -> str:
    return (tmp_path / "server.log").read_text(errors="replace")[-4000:]


def _requests_by_pid(metrics_dir: Path, pids: set[int], route: str) -> dict[int, float]:
    """Per worker: protolyte_http_requests_total{route=...} from its own counter file."""
    out = {}
    for pid in pids:
        path = metrics_dir / f"counter_{pid}.db"
        total = 0.0
        if path.exists():
            for metric in MultiProcessCollector.merge([str(path)], accumulate=False):
                for s in metric.samples:
                    if s.name == "protolyte_http_requests_total" and s.labels.get("route") == route:
                        total += s.value
        out[pid] = total
    return out


def _batches_observed(metrics_dir: Path) -> float:
    """protolyte_batch_size_count summed over every process's histogram file."""
    files = [str(p) for p in metrics_dir.glob("histogram_*.db")]
    total = 0.0
    for metric in MultiProcessCollector.merge(files, accumulate=True) if files else []:
        for s in metric.samples:
            if s.name == "protolyte_batch_size_count":
                total += s.value
    return total


def _exposition_total(text: str, **labels: str) -> float:
    total = 0.0
    for fam in text_string_to_metric_families(text):
        for s in fam.samples:
            if s.name == "protolyte_http_requests_total" and all(s.labels.get(k) == v for k, v in labels.items()):
                total += s.value
    return total


@pytest.mark.skipif(not hasattr(os, "sched_getaffinity"), reason="CPU affinity is Linux only")
def test_cpu_affinity_auto_pins_each_gunicorn_worker_to_its_own_cpu(tmp_path: Path) -> None:
    allowed = sorted(os.sched_getaffinity(0))
    with running_server(tmp_path, workers=2, PROTOLYTE_CPU_AFFINITY="auto") as (proc, port, _):
        workers = _children(proc.pid)
        assert len(workers) == 2, f"expected 2 gunicorn workers under {proc.pid}, found {workers}"
        cpus = sorted(c for pid in workers for c in os.sched_getaffinity(pid))
        master = os.sched_getaffinity(proc.pid)
        assert _request(port, "GET", "/v1/systems")[0] == 200
    assert cpus == sorted(allowed[i % len(allowed)] for i in range(2))  # one CPU each, in slot order
    assert master == set(allowed)  # the master stays free


def test_two_workers_both_serve_and_metrics_sum_over_them(tmp_path: Path) -> None:
    with running_server(tmp_path, workers=2) as (proc, port, metrics_dir):
        workers = _children(proc.pid)
        assert len(workers) == 2, f"expected 2 gunicorn workers under {proc.pid}, found {workers}"

        sent = 0
        errors: list[BaseException] = []
        lock = threading.Lock()

        def burst(n: int) -> None:
            nonlocal sent
            try:
                for _ in range(n):
                    status, _ = _request(port, "GET", "/v1/systems")
                    assert status == 200
                    with lock:
                        sent += 1
            except BaseException as exc:  # noqa: BLE001
                errors.append(exc)

        deadline = time.monotonic() + 20
        per_pid = _requests_by_pid(metrics_dir, workers, "/v1/systems")
        while not all(v > 0 for v in per_pid.values()):
            assert time.monotonic() < deadline, f"after {sent} requests only {per_pid} served"
            threads = [threading.Thread(target=burst, args=(10,)) for _ in range(4)]
            for t in threads:
                t.start()
            for t in threads:
                t.join(timeout=30)
            assert not errors, errors
            per_pid = _requests_by_pid(metrics_dir, workers, "/v1/systems")

        assert sent >= 40
        # Each worker's own file counts what it served; together exactly what was sent.
        assert sum(per_pid.values()) == sent, (per_pid, sent)
        # Any worker answers /metrics with the sum over both (several scrapes, so both
        # workers answer some of them).
        for _ in range(6):
            status, body = _request(port, "GET", "/metrics")
            assert status == 200
            text = body.decode()
            assert _exposition_total(text, route="/v1/systems", method="GET", status="200") == sent
            assert _exposition_total(text) >= sent
        families = {f.name for f in text_string_to_metric_families(text)}
        assert {"protolyte_http_requests", "protolyte_http_request_duration_seconds",
                "protolyte_build_info"} <= families
        assert proc.poll() is None

        if PROMTOOL:  # lint the real multiprocess exposition too
            r = subprocess.run([PROMTOOL, "check", "metrics"], input=text, capture_output=True,
                               text=True, timeout=30, check=False)
            assert r.returncode == 0, r.stdout + r.stderr

        # The image's HEALTHCHECK command passes against the running server.
        cmd = _dockerfile_healthcheck()
        assert cmd[:2] == ["python", "-c"]
        r = subprocess.run([sys.executable, "-c", cmd[2]], env={**os.environ, "PROTOLYTE_PORT": str(port)},
                           capture_output=True, timeout=20, check=False)
        assert r.returncode == 0, r.stderr


def _dockerfile_env(name: str) -> str:
    m = re.search(rf'\b{name}="([^"]*)"', (ROOT / "deploy" / "Dockerfile").read_text())
    assert m, f"deploy/Dockerfile sets no {name}"
    return m.group(1)


def _dockerfile_healthcheck() -> list[str]:
    text = (ROOT / "deploy" / "Dockerfile").read_text().replace("\\\n", " ")
    m = re.search(r"^HEALTHCHECK\b.*?\bCMD\s+(\[.*\])\s*$", text, re.M)
    assert m, "no exec-form HEALTHCHECK in deploy/Dockerfile"
    return list(json.loads(m.group(1)))


def _example_stream() -> dict[str, Any]:
    from service.app import create_app  # noqa: PLC0415

    schema = create_app().openapi()["components"]["schemas"]["Stream"]
    examples = schema.get("examples") or [schema["example"]]
    return dict(examples[0])


def _sigterm_during_batch(tmp_path: Path, workers: int, items: int) -> None:
    body = json.dumps({"items": [_example_stream()] * items}).encode()
    # A generous per-request budget: this test is about shutdown, not the budget.
    with running_server(tmp_path, workers=workers, PROTOLYTE_SOLVE_TIME_BUDGET_S="60",
                        PROTOLYTE_BATCH_MAX_ITEMS=str(items)) as (proc, port, metrics_dir):
        result: dict[str, Any] = {}

        def send() -> None:
            t0 = time.monotonic()
            try:
                result["status"], result["body"] = _request(port, "POST", "/v1/equilibrium/batch", body, timeout=60)
            except BaseException as exc:  # noqa: BLE001
                result["error"] = exc
            result["seconds"] = time.monotonic() - t0

        client = threading.Thread(target=send)
        client.start()
        # In flight: the server has parsed the batch and starts solving it (the service
        # observes protolyte_batch_size right before the solve).
        deadline = time.monotonic() + 30
        while _batches_observed(metrics_dir) < 1:
            assert client.is_alive(), f"the batch finished before it was seen in flight: {result}"
            assert time.monotonic() < deadline, "the batch was never seen in flight"
            time.sleep(0.02)
        assert client.is_alive(), f"the batch finished before SIGTERM could be sent: {result}"
        proc.send_signal(signal.SIGTERM)
        t_term = time.monotonic()
        client.join(timeout=60)
        assert not client.is_alive(), "the batch request never finished"
        assert "error" not in result, f"request failed after SIGTERM: {result.get('error')!r}\n{_log(tmp_path)}"
        assert result["status"] == 200, result["body"][:500]
        answer = json.loads(result["body"])
        assert len(answer["results"]) == items
        assert all(item["ok"] for item in answer["results"])
        # The server exits by itself once the request is done: gunicorn's master with 0;
        # uvicorn, after its graceful shutdown, re-raises the SIGTERM it caught, so the
        # single process ends by that signal (what a container runtime expects).
        rc = proc.wait(timeout=40)
        assert rc in ((0,) if workers > 1 else (0, -signal.SIGTERM)), _log(tmp_path)
        assert "Traceback" not in _log(tmp_path), _log(tmp_path)
        assert time.monotonic() - t_term < 35
        with pytest.raises(OSError):
            _request(port, "GET", "/healthz", timeout=2)


def test_sigterm_during_a_batch_finishes_it_gunicorn(tmp_path: Path) -> None:
    _sigterm_during_batch(tmp_path, workers=2, items=10_000)


def test_sigterm_during_a_batch_finishes_it_single_process(tmp_path: Path) -> None:
    _sigterm_during_batch(tmp_path, workers=1, items=5_000)
