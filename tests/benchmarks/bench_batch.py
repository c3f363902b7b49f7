"""A 10 000-item POST /v1/equilibrium/batch end to end, against the core and JSON alone.

    python tests/benchmarks/bench_batch.py [--items 10000] [--repeat 3]

Starts the real server (``protolyte serve``, one worker, 127.0.0.1, a free port) and
posts one batch over loopback with httpx (once to warm up, then ``--repeat`` times,
best kept; the server's CPU seconds per batch, mean of those, are the figure to compare
on a shared machine). In this
process, on the same streams, it times ``models.equilibrium.solve_many`` (with the
collector paused, as the batch route runs, so the comparison is like for like; the
time with the server's GC thresholds is printed too) and orjson encoding plus
decoding of the same request and response bodies. Prints the ratios; the target is
end to end <= 2 x solve_many + JSON. Figures are wall-clock on a noisy machine: read
the ratios (same run), not the absolute seconds.

Streams: the OpenAPI ``Stream`` example (the creamery: nine entries, a custom system,
Davies, 31.5 °C) with every amount scaled by an invented factor in [0.8, 1.2].
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import gc  # noqa: E402
import random  # noqa: E402
import sys  # noqa: E402
from pathlib import Path  # noqa: E402

import httpx  # noqa: E402
import orjson  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _server import ROOT, Server, best  # noqa: E402

sys.path.insert(0, str(ROOT))
from models.equilibrium import solve_many  # noqa: E402
from service.app import _GC_THRESHOLDS  # noqa: E402
from service.convert import to_spec  # noqa: E402
try:
    from service.routes_equilibrium import gc_paused  # noqa: E402
except ImportError:  # a tree from before the route paused the collector (for comparisons)
    from contextlib import nullcontext as gc_paused  # noqa: E402
from service.schemas import _CREAMERY_EXAMPLE, BatchRequest  # noqa: E402


def items(n: int, seed: int = 6) -> list[dict]:
    rng = random.Random(seed)
    out = []
    for _ in range(n):
        ex = dict(_CREAMERY_EXAMPLE)
        ex["composition"] = [dict(e, value=e["value"] * rng.uniform(0.8, 1.2)) for e in ex["composition"]]
        out.append(ex)
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--items", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    payload = {"items": items(args.items)}
    body = orjson.dumps(payload)
    specs = [to_spec(s) for s in BatchRequest.model_validate_json(body).items]

    server = Server(PROTOLYTE_BATCH_MAX_ITEMS=str(max(args.items, 10_000)))
    try:
        server.wait_ready()
        with httpx.Client(base_url=server.url, timeout=300.0) as client:
            def post() -> bytes:
                r = client.post("/v1/equilibrium/batch", content=body, headers={"content-type": "application/json"})
                r.raise_for_status()
                return r.content

            post()  # warm-up (first-use caches), not timed
            cpu0 = server.cpu_seconds()
            t_http, response = best(post, args.repeat)
            cpu_per_batch = (server.cpu_seconds() - cpu0) / args.repeat
        mem = server.memory_mib()
        t_server = min(server.request_durations("/v1/equilibrium/batch") or [float("nan")])
    finally:
        server.stop()
    answer = orjson.loads(response)
    assert len(answer["results"]) == args.items

    gc.collect()
    gc.freeze()
    gc.set_threshold(*_GC_THRESHOLDS)  # as the server runs
    t_solve_gc, _ = best(lambda: solve_many(specs), args.repeat)
    with gc_paused():  # as the batch route runs it (the collector off for the request)
        t_solve, _ = best(lambda: solve_many(specs), args.repeat)
    t_req_enc, _ = best(lambda: orjson.dumps(payload), args.repeat)
    t_req_dec, _ = best(lambda: orjson.loads(body), args.repeat)
    t_resp_dec, decoded = best(lambda: orjson.loads(response), args.repeat)
    t_resp_enc, _ = best(lambda: orjson.dumps(decoded), args.repeat)
    t_json = t_req_enc + t_req_dec + t_resp_enc + t_resp_dec
    budget = 2 * t_solve + t_json

    print(f"POST /v1/equilibrium/batch, {args.items} items ({len(body) / 2**20:.1f} MiB in, "
          f"{len(response) / 2**20:.1f} MiB out), one worker, loopback, {os.cpu_count()} cores; "
          f"best of {args.repeat}")
    print(f"  succeeded {answer['succeeded']}, failed {answer['failed']}")
    print(f"{'figure':52s} {'seconds':>8s}")
    print(f"{'end to end over loopback (httpx)':52s} {t_http:8.3f}")
    print(f"{'  of which in the server (its access log)':52s} {t_server:8.3f}")
    print(f"{'  server CPU per batch (user+sys, mean; robust to load)':52s} {cpu_per_batch:8.3f}")
    print(f"{'models.equilibrium.solve_many, same streams':52s} {t_solve:8.3f}")
    print(f"{'  the same with the GC on (server thresholds)':52s} {t_solve_gc:8.3f}")
    print(f"{'orjson encode+decode of request and response':52s} {t_json:8.3f}")
    print(f"{'ratio  end to end / solve_many':52s} {t_http / t_solve:8.2f}")
    print(f"{'ratio  end to end / (2 x solve_many + JSON)':52s} {t_http / budget:8.2f}   (target <= 1)")
    print(f"{'ratio  end to end / (solve_many + JSON)':52s} {t_http / (t_solve + t_json):8.2f}")
    print(f"server peak RSS (VmHWM) {mem.get('VmHWM', 0):.0f} MiB, VmRSS after {mem.get('VmRSS', 0):.0f} MiB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
