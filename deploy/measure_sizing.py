#!/usr/bin/env python3
"""Measure one Protolyte server process under load, to size a pod's CPU and memory.

Starts ONE server process (as on Kubernetes: ``uvicorn service.app:app``, one process
per pod) on 127.0.0.1, waits for /readyz, then sends, over keep-alive connections from a
few client threads:

* ``--singles`` single-stream requests (POST /v1/equilibrium, the OpenAPI example
  stream), and
* ``--batches`` batch requests of ``--batch-size`` streams (POST /v1/equilibrium/batch),
  the largest the service accepts by default being 10 000.

It reads the server's CPU time (utime + stime from /proc/<pid>/stat) and memory (VmRSS,
VmHWM from /proc/<pid>/status) before and after each phase, and prints one JSON object.
Only loopback traffic; bounded by the request counts given. Run from the repository
root with the project installed:

    .venv/bin/python deploy/measure_sizing.py --singles 3000 --batches 5 --batch-size 10000
"""

from __future__ import annotations

import argparse
import http.client
import json
import os
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

CLK_TCK = os.sysconf("SC_CLK_TCK")


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def cpu_seconds(pid: int) -> float:
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / CLK_TCK  # utime, stime


def memory_mib(pid: int) -> dict[str, float]:
    out = {}
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        key, _, value = line.partition(":")
        if key in {"VmRSS", "VmHWM"}:
            out[key] = int(value.split()[0]) / 1024
    return out


def example_stream(port: int) -> dict[str, Any]:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    conn.request("GET", "/openapi.json")
    spec = json.loads(conn.getresponse().read())
    conn.close()
    schema = spec["components"]["schemas"]["Stream"]
    examples = schema.get("examples") or [schema["example"]]
    return dict(examples[0])


def wait_ready(port: int, proc: subprocess.Popen[bytes], timeout_s: float = 60) -> float:
    start = time.monotonic()
    while time.monotonic() - start < timeout_s:
        if proc.poll() is not None:
            raise SystemExit(f"server exited with {proc.returncode}")
        try:
            conn = http.client.HTTPConnection("127.0.0.1", port, timeout=2)
            conn.request("GET", "/readyz")
            if conn.getresponse().status == 200:
                return time.monotonic() - start
        except OSError:
            pass
        time.sleep(0.1)
    raise SystemExit("server not ready in time")


def load(port: int, path: str, body: bytes, count: int, threads: int) -> dict[str, Any]:
    """Send ``count`` POSTs over ``threads`` keep-alive connections; return latencies."""
    latencies: list[float] = []
    statuses: dict[int, int] = {}
    lock = threading.Lock()
    per_thread = [count // threads + (1 if i < count % threads else 0) for i in range(threads)]

    def worker(n: int) -> None:
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=120)
        mine: list[float] = []
        codes: dict[int, int] = {}
        for _ in range(n):
            t0 = time.perf_counter()
            conn.request("POST", path, body=body, headers={"Content-Type": "application/json"})
            resp = conn.getresponse()
            resp.read()
            mine.append(time.perf_counter() - t0)
            codes[resp.status] = codes.get(resp.status, 0) + 1
        conn.close()
        with lock:
            latencies.extend(mine)
            for k, v in codes.items():
                statuses[k] = statuses.get(k, 0) + v

    ts = [threading.Thread(target=worker, args=(n,)) for n in per_thread if n]
    t0 = time.perf_counter()
    for t in ts:
        t.start()
    for t in ts:
        t.join()
    wall = time.perf_counter() - t0
    latencies.sort()

    def q(p: float) -> float:
        return latencies[min(len(latencies) - 1, int(p * len(latencies)))]

    return {"requests": count, "wall_s": round(wall, 3), "statuses": statuses,
            "latency_p50_s": round(q(0.50), 5), "latency_p99_s": round(q(0.99), 5)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[1])
    ap.add_argument("--singles", type=int, default=3000)
    ap.add_argument("--batches", type=int, default=5)
    ap.add_argument("--batch-size", type=int, default=10_000)
    ap.add_argument("--threads", type=int, default=4)
    ap.add_argument("--batch-threads", type=int, default=1, help="concurrent batch requests")
    args = ap.parse_args()

    port = free_port()
    env = {**os.environ, "PROTOLYTE_LOG_LEVEL": "WARNING", "OMP_NUM_THREADS": "1",
           "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
    env.pop("PROMETHEUS_MULTIPROC_DIR", None)
    cmd = [sys.executable, "-m", "uvicorn", "service.app:app", "--host", "127.0.0.1",
           "--port", str(port), "--no-access-log", "--log-level", "warning"]
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL)
    try:
        ready_s = wait_ready(port, proc)
        pid = proc.pid
        result: dict[str, Any] = {"python": sys.version.split()[0], "cpus": os.cpu_count(),
                                  "ready_after_s": round(ready_s, 2),
                                  "after_start": memory_mib(pid)}
        stream = example_stream(port)
        single = json.dumps(stream).encode()
        # Warm-up, not counted.
        load(port, "/v1/equilibrium", single, 50, 1)

        c0 = cpu_seconds(pid)
        r = load(port, "/v1/equilibrium", single, args.singles, args.threads)
        c1 = cpu_seconds(pid)
        r["server_cpu_s"] = round(c1 - c0, 3)
        r["cpu_ms_per_request"] = round(1000 * (c1 - c0) / args.singles, 3)
        r["throughput_rps"] = round(args.singles / r["wall_s"], 1)
        r["memory_after"] = memory_mib(pid)
        result["single"] = r

        if args.batches:
            batch = json.dumps({"items": [stream] * args.batch_size}).encode()
            c0 = cpu_seconds(pid)
            r = load(port, "/v1/equilibrium/batch", batch, args.batches, args.batch_threads)
            c1 = cpu_seconds(pid)
            r["batch_size"] = args.batch_size
            r["concurrent"] = args.batch_threads
            r["body_mib"] = round(len(batch) / 2**20, 2)
            r["server_cpu_s"] = round(c1 - c0, 3)
            r["cpu_s_per_batch"] = round((c1 - c0) / args.batches, 3)
            r["cpu_us_per_stream"] = round(1e6 * (c1 - c0) / (args.batches * args.batch_size), 1)
            r["memory_after"] = memory_mib(pid)
            result["batch"] = r
        result["peak_rss_mib"] = memory_mib(pid)["VmHWM"]
        print(json.dumps(result, indent=2))
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


if __name__ == "__main__":
    main()
