"""A real ``protolyte serve`` process on 127.0.0.1 for the HTTP benchmarks (not a test).

One worker, a free loopback port, stdout/stderr to a temporary file; the caller stops
it in a ``finally`` (``server.stop()``). ``PYTHONPATH`` puts this checkout first, so a
git worktree benchmarks its own code even when the venv's editable install points at
another tree. CPU time and memory are read from /proc.
"""

from __future__ import annotations

import http.client
import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

CLK_TCK = os.sysconf("SC_CLK_TCK")
ROOT = Path(__file__).resolve().parents[2]


def best(fn, repeat: int, clock=time.perf_counter) -> tuple[float, object]:
    """Best time [s] of ``repeat`` calls of ``fn`` and the last value it returned; wall
    time by default, ``clock=time.process_time`` for this process's CPU time."""
    t_best, value = float("inf"), None
    for _ in range(repeat):
        t0 = clock()
        value = fn()
        t_best = min(t_best, clock() - t0)
    return t_best, value


def tree_env(tree: Path | str = ROOT) -> dict[str, str]:
    """This process's environment with ``tree`` first on ``PYTHONPATH``: a subprocess
    imports that checkout's code, not whatever tree the venv's editable install names."""
    path = os.pathsep.join(p for p in (str(tree), os.environ.get("PYTHONPATH", "")) if p)
    return {**os.environ, "PYTHONPATH": path}


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def protolyte_command() -> list[str]:
    exe = shutil.which("protolyte", path=str(Path(sys.executable).parent)) or shutil.which("protolyte")
    return [exe, "serve"] if exe else [sys.executable, "-m", "service.cli", "serve"]


class Server:
    """``protolyte serve`` with one worker on 127.0.0.1:<free port>."""

    def __init__(self, log_level: str = "INFO", **env: str) -> None:
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self._log = tempfile.NamedTemporaryFile(prefix="protolyte-bench-", suffix=".log", delete=False)
        full = {
            **tree_env(),
            "PROTOLYTE_HOST": "127.0.0.1",
            "PROTOLYTE_PORT": str(self.port),
            "PROTOLYTE_WORKERS": "1",
            "PROTOLYTE_LOG_LEVEL": log_level,
            "OPENBLAS_NUM_THREADS": "1",
            "OMP_NUM_THREADS": "1",
            **env,
        }
        full.pop("PROMETHEUS_MULTIPROC_DIR", None)
        self.proc = subprocess.Popen(
            protolyte_command(), cwd=ROOT, env=full, stdout=self._log, stderr=subprocess.STDOUT
        )

    def wait_ready(self, timeout_s: float = 120.0) -> float:
        start = time.monotonic()
        while time.monotonic() - start < timeout_s:
            if self.proc.poll() is not None:
                raise SystemExit(f"server exited with {self.proc.returncode}; log: {self._log.name}")
            try:
                conn = http.client.HTTPConnection("127.0.0.1", self.port, timeout=2)
                conn.request("GET", "/readyz")
                if conn.getresponse().status == 200:
                    return time.monotonic() - start
            except OSError:
                pass
            time.sleep(0.1)
        raise SystemExit(f"server not ready after {timeout_s:g} s; log: {self._log.name}")

    def cpu_seconds(self) -> float:
        fields = Path(f"/proc/{self.proc.pid}/stat").read_text().rsplit(")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / CLK_TCK  # utime + stime

    def thread_cpu_seconds(self) -> tuple[float, float]:
        """CPU time [s] of the main (event-loop) thread and of all other threads (solves)."""
        main = other = 0.0
        for task in Path(f"/proc/{self.proc.pid}/task").iterdir():
            try:
                fields = (task / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:  # the thread ended meanwhile
                continue
            cpu = (int(fields[11]) + int(fields[12])) / CLK_TCK
            if int(task.name) == self.proc.pid:
                main += cpu
            else:
                other += cpu
        return main, other

    def memory_mib(self) -> dict[str, float]:
        out: dict[str, float] = {}
        for line in Path(f"/proc/{self.proc.pid}/status").read_text().splitlines():
            key, _, value = line.partition(":")
            if key in ("VmRSS", "VmHWM"):
                out[key] = int(value.split()[0]) / 1024
        return out

    def request_durations(self, route: str) -> list[float]:
        """``duration_seconds`` of the access-log lines of ``route`` so far (JSON lines)."""
        import json

        self._log.flush()
        out = []
        for line in Path(self._log.name).read_text(encoding="utf-8", errors="replace").splitlines():
            if line.startswith("{") and '"route"' in line:
                rec = json.loads(line)
                if rec.get("route") == route and "duration_seconds" in rec:
                    out.append(float(rec["duration_seconds"]))
        return out

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=5)
        self._log.close()
        os.unlink(self._log.name)
