"""Single-stream latency and throughput over loopback: POST /v1/equilibrium under ``hey``.

    python tests/benchmarks/bench_http.py [--duration 30] [--concurrency 50] [--stream creamery,simple]
                                          [--cpu-affinity off,auto]

Starts the real server (``protolyte serve``, one worker, 127.0.0.1, a free port), then
runs the load generator ``hey`` (Debian package ``hey``: ``apt-get install -y hey``) as a
separate process: ``--concurrency`` clients for ``--duration`` seconds, each client capped
at 200 requests/s (so at most 30 s x 50 x 200 requests), loopback only; it stops by
itself and is killed if it overruns. Prints requests/s, p50/p99 latency, the error
count and the server's CPU time per request; the server is stopped in a ``finally``.

Streams: ``creamery`` is the first OpenAPI example of ``Stream`` (nine entries, a custom
system, Davies, 31.5 °C); ``simple`` is Na+/Cl-/carbonate at 25 °C. The machine has few
cores and hey shares them with the server: compare the figures of one run, and read
``server CPU ms/request`` as the cost that scales. ``group`` is the mean number of
requests per coalesced solve and ``of 1`` the share of solves that had just one (from
the server's ``protolyte_coalesced_group_size``). It is split into the event-loop
(main) thread, i.e. the HTTP edge, and the other threads, i.e. the coalesced solves.

Each ``--cpu-affinity`` value (``PROTOLYTE_CPU_AFFINITY``, see ``service/affinity.py``)
gets its own server, the values taking turns stream by stream; the last lines give
each value's req/s as a ratio to the first's, measured in the same run.
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import json  # noqa: E402
import re  # noqa: E402
import shutil  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import urllib.request  # noqa: E402
from pathlib import Path  # noqa: E402

from prometheus_client.parser import text_string_to_metric_families  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _server import ROOT, Server  # noqa: E402

sys.path.insert(0, str(ROOT))
from service.schemas import _CREAMERY_EXAMPLE  # noqa: E402

STREAMS: dict[str, dict] = {
    "creamery": _CREAMERY_EXAMPLE,
    "simple": {
        "composition": [
            {"name": "Na+", "value": 2.0, "unit": "mmol/L"},
            {"name": "Cl-", "value": 1.0, "unit": "mmol/L"},
            {"name": "carbonate", "value": 1.0, "unit": "mmol/L"},
        ]
    },
}
PER_CLIENT_QPS_CAP = 200


def parse_hey(text: str) -> dict[str, float]:
    """Requests/s, p50/p99 [s], 2xx and non-2xx counts, error lines from hey's summary."""
    rps = float(re.search(r"Requests/sec:\s+([\d.]+)", text).group(1))
    pct = {int(p): float(v) for p, v in re.findall(r"(\d+)%% in ([\d.]+) secs".replace("%%", "%"), text)}
    codes = {int(c): int(n) for c, n in re.findall(r"\[(\d{3})\]\s+(\d+) responses", text)}
    err_block = text.split("Error distribution:", 1)[1] if "Error distribution:" in text else ""
    errors = sum(int(n) for n in re.findall(r"^\s*\[(\d+)\]", err_block, flags=re.M))
    ok = sum(n for c, n in codes.items() if 200 <= c < 300)
    return {
        "rps": rps,
        "p50_s": pct.get(50, float("nan")),
        "p99_s": pct.get(99, float("nan")),
        "ok": ok,
        "non_2xx": sum(codes.values()) - ok,
        "errors": errors,
    }


def run_hey(url: str, body: Path, duration_s: int, concurrency: int) -> str:
    hey = shutil.which("hey")
    if hey is None:
        raise SystemExit("hey is not installed: apt-get install -y hey")
    cmd = [
        hey, "-z", f"{duration_s}s", "-c", str(concurrency), "-q", str(PER_CLIENT_QPS_CAP),
        "-t", "10", "-m", "POST", "-T", "application/json", "-D", str(body), url,
    ]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=duration_s + 60, check=True)
    return done.stdout


def group_counts(server: Server) -> tuple[float, float, float]:
    """The server's coalesced solves so far: (groups, requests in them, groups of one)."""
    with urllib.request.urlopen(server.url + "/metrics", timeout=10) as resp:
        text = resp.read().decode()
    got = {"count": 0.0, "sum": 0.0, "one": 0.0}
    for fam in text_string_to_metric_families(text):
        for smp in fam.samples:
            if smp.name == "protolyte_coalesced_group_size_count":
                got["count"] = smp.value
            elif smp.name == "protolyte_coalesced_group_size_sum":
                got["sum"] = smp.value
            elif smp.name == "protolyte_coalesced_group_size_bucket" and float(smp.labels["le"]) == 1.0:
                got["one"] = smp.value
    return got["count"], got["sum"], got["one"]


def measure(server: Server, body: Path, duration_s: int, concurrency: int) -> dict[str, float]:
    """One hey run against ``server``: hey's figures, the server's CPU per request and
    its coalesced groups (mean size, share of groups of one request)."""
    groups0 = group_counts(server)
    cpu0 = server.cpu_seconds()
    loop0, other0 = server.thread_cpu_seconds()
    out = run_hey(server.url + "/v1/equilibrium", body, duration_s, concurrency)
    cpu = server.cpu_seconds() - cpu0
    loop1, other1 = server.thread_cpu_seconds()
    r = parse_hey(out)
    answered = r["ok"] + r["non_2xx"]
    r["cpu_ms_per_request"] = 1e3 * cpu / answered if answered else float("nan")
    r["loop_ms_per_request"] = 1e3 * (loop1 - loop0) / answered if answered else float("nan")
    r["other_ms_per_request"] = 1e3 * (other1 - other0) / answered if answered else float("nan")
    groups, requests, ones = (b - a for a, b in zip(groups0, group_counts(server)))
    r["mean_group"] = requests / groups if groups else float("nan")
    r["groups_of_one"] = ones / groups if groups else float("nan")
    return r


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--duration", type=int, default=30, help="seconds of load per stream (default 30)")
    ap.add_argument("--concurrency", type=int, default=50, help="concurrent clients (default 50)")
    ap.add_argument("--stream", default="creamery,simple", help="comma-separated: creamery, simple")
    ap.add_argument("--log-level", default="INFO", help="server log level (default INFO, as deployed)")
    ap.add_argument(
        "--cpu-affinity", default="off,auto",
        help="comma-separated PROTOLYTE_CPU_AFFINITY values, one server each (default off,auto)",
    )
    args = ap.parse_args()
    names = [s.strip() for s in args.stream.split(",") if s.strip()]
    for name in names:
        if name not in STREAMS:
            raise SystemExit(f"unknown stream {name!r}; choose from {', '.join(STREAMS)}")
    pins = [p.strip() for p in args.cpu_affinity.split(",") if p.strip()]
    servers: dict[str, Server] = {}
    rows = []
    mem: dict[str, dict[str, float]] = {}
    try:
        for pin in pins:
            servers[pin] = Server(log_level=args.log_level, PROTOLYTE_CPU_AFFINITY=pin)
        for server in servers.values():
            server.wait_ready()
        with tempfile.TemporaryDirectory() as tmp:
            for name in names:
                body = Path(tmp) / f"{name}.json"
                body.write_text(json.dumps(STREAMS[name]))
                for pin, server in servers.items():  # the values take turns: same machine state
                    run_hey(server.url + "/v1/equilibrium", body, 2, 4)  # warm-up, 2 s
                    rows.append((name, pin, measure(server, body, args.duration, args.concurrency)))
        mem = {pin: server.memory_mib() for pin, server in servers.items()}
    finally:
        for server in servers.values():
            server.stop()
    print(f"POST /v1/equilibrium, one worker, {args.concurrency} clients, {args.duration} s each, "
          f"hey on 127.0.0.1, {os.cpu_count()} cores (absolute figures)")
    print(f"{'stream':10s} {'affinity':>8s} {'req/s':>8s} {'p50 ms':>8s} {'p99 ms':>8s} {'2xx':>8s} {'non-2xx':>8s} "
          f"{'errors':>7s} {'server CPU ms/req':>18s} {'(loop':>6s} {'solver)':>8s} {'group':>6s} {'of 1':>5s}")
    for name, pin, r in rows:
        print(f"{name:10s} {pin:>8s} {r['rps']:8.1f} {1e3 * r['p50_s']:8.1f} {1e3 * r['p99_s']:8.1f} {r['ok']:8d} "
              f"{r['non_2xx']:8d} {r['errors']:7d} {r['cpu_ms_per_request']:18.2f} "
              f"{r['loop_ms_per_request']:6.2f} {r['other_ms_per_request']:8.2f} "
              f"{r['mean_group']:6.1f} {r['groups_of_one']:5.0%}")
    for pin, m in mem.items():
        print(f"server ({pin}) memory after the runs: VmRSS {m.get('VmRSS', 0):.0f} MiB, VmHWM {m.get('VmHWM', 0):.0f} MiB")
    by = {(name, pin): r for name, pin, r in rows}
    for name in names:
        for pin in pins[1:]:
            ratio = by[(name, pin)]["rps"] / by[(name, pins[0])]["rps"]
            print(f"ratio {name}: req/s with affinity {pin} / {pins[0]} = {ratio:.2f} (same run)")
    print("targets: >= 800 req/s, p99 <= 20 ms, 0 errors")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
