"""Small-batch cost of ``models.equilibrium.solve_many``: ms per call and per stream.

    python tests/benchmarks/bench_small_batches.py [--repeat 7] [--budget 0.25]
    python tests/benchmarks/bench_small_batches.py --compare /tmp/small-base [--rounds 3]

Batches of n = 1, 5, 25, 100 copies of two streams: the OpenAPI creamery example
(nine entries, a custom system, Davies, 31.5 °C) and a plain one (Na+ 2, Cl- 1,
carbonate 1 mmol/L, 25 °C). Each figure is CPU time (``time.process_time``), the best
of ``--repeat`` timings of a loop of calls lasting about ``--budget`` s: other jobs on
the machine inflate wall time, CPU time much less.

``--compare TREE`` times TREE (e.g. a ``git worktree`` of the base commit) and this
tree in alternating subprocesses (``--rounds`` each, best kept) and prints the ratio
new/old per case: read the ratios (same run), not the absolute figures.
A benchmark prints figures; it asserts nothing.
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import json  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

from _server import ROOT, tree_env  # noqa: E402

SIZES = (1, 5, 25, 100)


def measure(repeat: int, budget: float) -> dict[str, float]:
    """ms per call for each case, best of ``repeat``."""
    from models.equilibrium import solve_many
    from models.stream import Entry, StreamSpec
    from models.thermo import load_database
    from service.convert import to_spec
    from service.schemas import _CREAMERY_EXAMPLE, Stream

    db = load_database()
    streams = {
        "creamery": to_spec(Stream.model_validate(_CREAMERY_EXAMPLE)),
        "plain": StreamSpec(
            (Entry("Na+", 2.0, "mmol/L"), Entry("Cl-", 1.0, "mmol/L"), Entry("carbonate", 1.0, "mmol/L"))
        ),
    }
    out: dict[str, float] = {}
    for label, spec in streams.items():
        for n in SIZES:
            batch = [spec] * n
            solve_many(batch, db)  # warm the caches
            t0 = time.process_time()
            calls = 0
            while time.process_time() - t0 < budget / 5:
                solve_many(batch, db)
                calls += 1
            t_best = float("inf")
            for _ in range(repeat):
                t0 = time.process_time()
                for _ in range(calls):
                    solve_many(batch, db)
                t_best = min(t_best, (time.process_time() - t0) / calls)
            out[f"{label} n={n}"] = t_best * 1e3
    return out


def run_tree(tree: str, repeat: int, budget: float) -> dict[str, float]:
    got = subprocess.run(
        [sys.executable, __file__, "--json", "--repeat", str(repeat), "--budget", str(budget)],
        cwd=tree, env=tree_env(tree), check=True, capture_output=True, text=True,
    )
    return json.loads(got.stdout)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=7)
    ap.add_argument("--budget", type=float, default=0.25, help="seconds per timing")
    ap.add_argument("--compare", metavar="TREE", help="a base tree to time against this one")
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--json", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.json:
        print(json.dumps(measure(args.repeat, args.budget)))
        return 0
    if not args.compare:
        sys.path.insert(0, str(ROOT))
        print(f"{'case':<16}{'ms/call':>10}{'ms/stream':>11}")
        for case, ms in measure(args.repeat, args.budget).items():
            n = int(case.split("=")[1])
            print(f"{case:<16}{ms:>10.3f}{ms / n:>11.4f}")
        return 0
    old: dict[str, float] = {}
    new: dict[str, float] = {}
    for _ in range(args.rounds):
        for store, tree in ((old, args.compare), (new, str(ROOT))):
            for case, ms in run_tree(tree, args.repeat, args.budget).items():
                store[case] = min(store.get(case, float("inf")), ms)
    print(f"CPU time, best of {args.rounds} alternating rounds x {args.repeat} timings")
    print(f"{'case':<16}{'old ms/call':>12}{'new ms/call':>12}{'new ms/stream':>14}{'new/old':>9}")
    for case in old:
        n = int(case.split("=")[1])
        print(f"{case:<16}{old[case]:>12.3f}{new[case]:>12.3f}{new[case] / n:>14.4f}{new[case] / old[case]:>9.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
