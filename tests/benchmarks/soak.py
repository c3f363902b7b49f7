"""Soak test (issue 7): the real server on loopback under a real load generator.

Starts ``protolyte serve`` on 127.0.0.1 (a free port), waits for /readyz, then runs ``hey``
(Debian package ``hey``) as a separate process for a bounded time against
``POST /v1/equilibrium`` (the creamery stream), sampling the server's resident memory from
``/proc/<pid>/status`` (VmRSS, summed over the server's process tree) every 0.5 s.

Passes (exit 0) when every response was a 200, hey reports no transport errors, and the
mean RSS of the last quarter of the run is within 10 % of the first quarter's. Prints the
figures for README "Reliability". Not a CI test: run it by hand.

    .venv/bin/python tests/benchmarks/soak.py                    # 60 s, 8 connections
    .venv/bin/python tests/benchmarks/soak.py --duration 30 --concurrency 16 --batch 100
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests"))
from conftest import CREAMERY_STREAM  # noqa: E402

RSS_DRIFT_MAX = 0.10


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def tree_rss_kib(pid: int) -> int:
    """VmRSS [KiB] of ``pid`` and all its descendants (gunicorn workers, if any)."""
    total, todo = 0, [pid]
    while todo:
        p = todo.pop()
        try:
            status = Path(f"/proc/{p}/status").read_text()
            total += int(re.search(r"^VmRSS:\s+(\d+) kB", status, re.M).group(1))  # type: ignore[union-attr]
            for task in Path(f"/proc/{p}/task").iterdir():
                children = (task / "children").read_text().split()
                todo += [int(c) for c in children]
        except (FileNotFoundError, ProcessLookupError, AttributeError):
            continue
    return total


def wait_ready(url: str, timeout_s: float) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            with urllib.request.urlopen(url + "/readyz", timeout=2) as r:
                if r.status == 200:
                    return
        except OSError:
            time.sleep(0.2)
    raise SystemExit(f"server at {url} not ready within {timeout_s} s")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--duration", type=int, default=60, help="load time [s] (at most 600)")
    ap.add_argument("--concurrency", type=int, default=8, help="hey connections")
    ap.add_argument("--batch", type=int, default=0, help="0 = single stream; N = /v1/equilibrium/batch of N items")
    ap.add_argument("--workers", type=int, default=1, help="PROTOLYTE_WORKERS of the server")
    args = ap.parse_args()
    if not 1 <= args.duration <= 600:
        raise SystemExit("--duration must be 1-600 s")
    hey = shutil.which("hey")
    if hey is None:
        raise SystemExit("hey not found: apt-get install -y hey")

    port = free_port()
    url = f"http://127.0.0.1:{port}"
    env = {**os.environ, "PROTOLYTE_HOST": "127.0.0.1", "PROTOLYTE_PORT": str(port),
           "PROTOLYTE_WORKERS": str(args.workers), "PROTOLYTE_LOG_LEVEL": "WARNING"}
    server = subprocess.Popen([sys.executable, "-m", "service.cli", "serve"], cwd=ROOT, env=env,
                              stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        wait_ready(url, 60)
        if args.batch:
            path, body = "/v1/equilibrium/batch", {"items": [CREAMERY_STREAM] * args.batch}
        else:
            path, body = "/v1/equilibrium", CREAMERY_STREAM
        with tempfile.NamedTemporaryFile("w", suffix=".json", delete=False) as f:
            json.dump(body, f)
            body_file = f.name

        samples: list[tuple[float, int]] = []
        stop = threading.Event()

        def sample() -> None:
            t0 = time.monotonic()
            while not stop.is_set():
                samples.append((time.monotonic() - t0, tree_rss_kib(server.pid)))
                stop.wait(0.5)

        sampler = threading.Thread(target=sample, daemon=True)
        sampler.start()
        cmd = [hey, "-z", f"{args.duration}s", "-c", str(args.concurrency), "-t", "20", "-m", "POST",
               "-T", "application/json", "-D", body_file, url + path]
        started = time.monotonic()
        out = subprocess.run(cmd, capture_output=True, text=True, timeout=args.duration + 120).stdout
        elapsed = time.monotonic() - started
        stop.set()
        sampler.join()
        os.unlink(body_file)
    finally:
        server.send_signal(signal.SIGTERM)
        try:
            server.wait(timeout=40)
        except subprocess.TimeoutExpired:
            server.kill()

    codes = {int(c): int(n) for c, n in re.findall(r"\[(\d{3})\]\s+(\d+) responses", out)}
    errors = re.search(r"Error distribution:\n(.*?)(?:\n\n|\Z)", out, re.S)
    rps = float(re.search(r"Requests/sec:\s+([\d.]+)", out).group(1))  # type: ignore[union-attr]
    lat = dict(re.findall(r"(\d+)%% in ([\d.]+) secs".replace("%%", "%"), out))
    total = sum(codes.values())
    q = max(1, len(samples) // 4)
    first = statistics.mean(r for _, r in samples[:q])
    last = statistics.mean(r for _, r in samples[-q:])
    drift = (last - first) / first

    print(f"command: {' '.join(cmd[:-1])} {path}")
    print(f"ran {elapsed:.1f} s, {args.concurrency} connections, {args.workers} worker(s), "
          f"{'batch of ' + str(args.batch) if args.batch else 'single stream'}")
    print(f"responses: {total} ({rps:.1f}/s), status codes: {codes}")
    print(f"latency p50 {float(lat.get('50', 'nan')) * 1e3:.1f} ms, p90 {float(lat.get('90', 'nan')) * 1e3:.1f} ms, "
          f"p99 {float(lat.get('99', 'nan')) * 1e3:.1f} ms")
    print(f"errors: {errors.group(1).strip() if errors else 'none'}")
    print(f"RSS samples: {len(samples)}; first quarter {first / 1024:.1f} MiB, last quarter {last / 1024:.1f} MiB, "
          f"drift {drift * 100:+.2f} % (limit ±{RSS_DRIFT_MAX * 100:.0f} %); "
          f"min {min(r for _, r in samples) / 1024:.1f}, max {max(r for _, r in samples) / 1024:.1f} MiB")
    ok = total > 0 and set(codes) == {200} and errors is None and abs(drift) <= RSS_DRIFT_MAX
    print("PASS" if ok else "FAIL")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
