"""Dose solve: ``models.dosing.plan_doses`` on a batch of streams to one setpoint.

    python tests/benchmarks/bench_dose.py [--streams 10000] [--repeat 3] [--reagent NaOH] [--setpoint 8.5]

Streams per second including parsing (``plan_doses`` takes StreamSpec records), best of
``--repeat``, one core (BLAS threads 1). Streams are an invented spread of process-water
analyses (Na+, Cl-, Ca2+, carbonate, phosphate, ammonia, acetate, mmol/L, 25 °C, Davies)
dosed with 25 % caustic soda to pH 8.5 by default. Target: >= 20 000 streams/s. Also
prints the ratio to ``solve_many`` on the same streams (an equilibrium solve each), which
travels between machines better than the absolute rate. CPU-time figures are printed
too: on a machine shared with other jobs they move far less than wall time.
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from collections import Counter  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
from _server import best  # noqa: E402
from models.dosing import plan_doses  # noqa: E402
from models.equilibrium import solve_many  # noqa: E402
from models.reagents import load_reagents  # noqa: E402
from models.stream import Entry, StreamSpec  # noqa: E402
from models.thermo import load_database  # noqa: E402


def streams(n: int, seed: int = 6) -> list[StreamSpec]:
    rng = np.random.default_rng(seed)
    cols = {
        "Na+": rng.uniform(0.5, 4.0, n),
        "Cl-": rng.uniform(1.0, 6.0, n),
        "Ca2+": rng.uniform(0.0, 1.0, n),
        "carbonate": rng.uniform(0.2, 3.0, n),
        "phosphate": rng.uniform(0.0, 0.5, n),
        "ammonia": rng.uniform(0.0, 1.0, n),
        "acetate": rng.uniform(0.0, 2.0, n),
    }
    return [
        StreamSpec(tuple(Entry(name, float(v[i]), "mmol/L") for name, v in cols.items()))
        for i in range(n)
    ]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--streams", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--reagent", default="NaOH")
    ap.add_argument("--setpoint", type=float, default=8.5)
    args = ap.parse_args()
    db = load_database()
    reagent = load_reagents()[args.reagent]
    specs = streams(args.streams)
    plan_doses(specs[:10], reagent, args.setpoint, db)  # warm caches
    t_dose, plans = best(lambda: plan_doses(specs, reagent, args.setpoint, db), args.repeat)
    t_eq, _ = best(lambda: solve_many(specs, db), args.repeat)
    cpu_dose, _ = best(lambda: plan_doses(specs, reagent, args.setpoint, db), args.repeat, time.process_time)
    cpu_eq, _ = best(lambda: solve_many(specs, db), args.repeat, time.process_time)
    kinds = Counter(type(p).__name__ for p in plans)
    print(f"plan_doses, {args.streams} streams, {args.reagent} to pH {args.setpoint:g}, one core, "
          f"{os.cpu_count()} cores on the machine; best of {args.repeat}")
    print(f"  outcomes: {dict(kinds)}")
    print(f"{'figure':44s} {'value':>12s}")
    print(f"{'dose solve [streams/s] (absolute)':44s} {args.streams / t_dose:12.0f}   (target >= 20 000)")
    print(f"{'solve_many, same streams [streams/s]':44s} {args.streams / t_eq:12.0f}")
    print(f"{'ratio  dose time / equilibrium time':44s} {t_dose / t_eq:12.2f}")
    # CPU time of this process: far less disturbed than wall time on a shared machine.
    print(f"{'dose solve, CPU time [streams/s]':44s} {args.streams / cpu_dose:12.0f}")
    print(f"{'ratio  dose / equilibrium, CPU time':44s} {cpu_dose / cpu_eq:12.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
