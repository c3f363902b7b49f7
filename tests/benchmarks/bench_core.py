"""Core solver benchmark: streams solved per second, and the ratio to a scalar loop.

    python tests/benchmarks/bench_core.py [--streams 100000] [--quick] [--baseline REV]

Prints a table. Figures are wall-clock on this machine: compare the ratios (measured
in the same run), not the absolute rates, between machines. One core: set
OMP_NUM_THREADS=OPENBLAS_NUM_THREADS=1 (done below before numpy loads).

``--baseline REV`` also loads models/solver.py as of git revision REV and times both
solvers alternately on the same batches (``--rounds`` each): the speed ratio is
measured in one process, so load from other jobs on a shared machine affects both.
"""

from __future__ import annotations

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import math  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from scipy.optimize import brentq  # noqa: E402

from _server import best  # noqa: E402
from models.columns import problem_from_columns  # noqa: E402
from models.solver import solve_balance  # noqa: E402

SIX = ("carbonate", "phosphate", "ammonia", "acetate", "sulfate", "borate")
TWELVE = SIX + ("sulfide", "formate", "propionate", "fluoride", "nitrite", "silicate")


def columns(n: int, systems: tuple[str, ...], rng: np.random.Generator) -> dict:
    """An invented spread of process-water analyses (demo data, mmol/L)."""
    cols = {
        "Na+": (rng.uniform(0.5, 8.0, n), "mmol/L"),
        "Cl-": (rng.uniform(0.0, 6.0, n), "mmol/L"),
        "Ca2+": (rng.uniform(0.0, 2.0, n), "mmol/L"),
    }
    for s in systems:
        cols[s] = (rng.uniform(0.05, 3.0, n), "mmol/L")
    return cols


def timed(fn, repeat: int = 3) -> float:
    return best(fn, repeat)[0]


def scalar_brentq_loop(batch, rows: np.ndarray) -> np.ndarray:
    """The per-stream baseline: scipy brentq on pH per stream, Davies ionic strength by
    fixed-point iteration, plain Python/math arithmetic."""
    p = batch.problem
    out = np.empty(rows.size)
    ln10 = math.log(10.0)
    for r, i in enumerate(rows):
        cum = p.cum_pk[i]
        z = p.charge[i]
        tot = p.total[i]
        s_ch, s_i, pkw, a = float(p.strong_charge[i]), float(p.strong_ionic[i]), float(p.pkw[i]), float(p.a_dh[i])
        ionic = 0.5 * s_i
        ph = 7.0
        for _ in range(50):
            sq = math.sqrt(ionic)
            g = a * (sq / (1 + sq) - 0.3 * ionic)

            def f(x: float) -> float:
                acc = s_ch + math.exp(-ln10 * (x - g)) - math.exp(ln10 * (x - pkw + g))
                for k in range(cum.shape[0]):
                    if tot[k] == 0:
                        continue
                    ws = [math.exp(ln10 * (j * x - cum[k, j] + z[k, j] ** 2 * g)) if math.isfinite(cum[k, j]) else 0.0 for j in range(cum.shape[1])]
                    sw = sum(ws)
                    acc += tot[k] * sum(z[k, j] * ws[j] for j in range(len(ws))) / sw
                return acc

            ph = brentq(f, -1.0, 15.0, xtol=1e-12)
            m_h, m_oh = 10 ** (-(ph - g)), 10 ** (ph - pkw + g)
            new = 0.5 * (s_i + m_h + m_oh)
            for k in range(cum.shape[0]):
                ws = [math.exp(ln10 * (j * ph - cum[k, j] + z[k, j] ** 2 * g)) if math.isfinite(cum[k, j]) else 0.0 for j in range(cum.shape[1])]
                sw = sum(ws)
                new += 0.5 * tot[k] * sum(z[k, j] ** 2 * ws[j] for j in range(len(ws))) / sw
            if abs(new - ionic) <= 1e-12 + 1e-10 * new:
                break
            ionic = new
        out[r] = ph
    return out


def baseline_solver(rev: str):
    """models/solver.py as of git revision ``rev``, loaded as a separate module."""
    import importlib.util
    import subprocess
    import sys
    import tempfile
    from pathlib import Path

    root = Path(__file__).resolve().parents[2]
    src = subprocess.check_output(["git", "-C", str(root), "show", f"{rev}:models/solver.py"], text=True)
    path = Path(tempfile.mkdtemp(prefix="bench-core-")) / "solver_baseline.py"
    path.write_text(src)
    spec = importlib.util.spec_from_file_location("solver_baseline", path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules["solver_baseline"] = mod
    spec.loader.exec_module(mod)
    return mod


def alternate(fn_old, fn_new, rounds: int) -> tuple[list[float], list[float]]:
    """Wall times [s] of ``rounds`` calls each, old and new interleaved (ABBA order)."""
    t_old, t_new = [], []
    for r in range(rounds):
        pair = ((fn_old, t_old), (fn_new, t_new))
        for fn, out in pair if r % 2 == 0 else pair[::-1]:
            t0 = time.perf_counter()
            fn()
            out.append(time.perf_counter() - t0)
    return t_old, t_new


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--streams", type=int, default=100_000)
    ap.add_argument("--loop-streams", type=int, default=1000)
    ap.add_argument("--quick", action="store_true", help="skip the scaling sweeps")
    ap.add_argument("--baseline", metavar="REV", help="also time models/solver.py of this git revision")
    ap.add_argument("--rounds", type=int, default=7, help="timed calls per solver with --baseline")
    args = ap.parse_args()
    rng = np.random.default_rng(20261202)
    n = args.streams
    rows = []

    b25 = problem_from_columns(columns(n, SIX, rng), 25.0, "davies")
    t_core = timed(lambda: solve_balance(b25.problem))
    st = solve_balance(b25.problem)
    rate = n / t_core
    rows.append(("core batch, six systems, Davies, 25 °C", f"{rate:,.0f} streams/s", "absolute", "≥ 200 000"))

    idx = rng.choice(n, size=min(args.loop_streams, n), replace=False)
    t0 = time.perf_counter()
    ref = scalar_brentq_loop(b25, idx)
    t_loop = (time.perf_counter() - t0) / idx.size
    agree = float(np.max(np.abs(ref - st.ph[idx])))
    rows.append(("ratio to per-stream brentq loop", f"{rate * t_loop:,.1f} ×", "ratio", "≥ 50 ×"))
    rows.append(("  largest |pH difference| to the loop", f"{agree:.1e}", "check", "< 1e-8"))

    b60 = problem_from_columns(columns(n, SIX, rng), 60.0, "extended_debye_huckel")
    t60 = timed(lambda: solve_balance(b60.problem))
    rows.append(("core batch, six systems, ext. Debye–Hückel, 60 °C", f"{n / t60:,.0f} streams/s", "absolute", "≥ 100 000"))
    rows.append(("  mean iterations (25 °C Davies)", f"{st.iterations.mean():.1f}", "info", ""))

    if args.baseline:
        old = baseline_solver(args.baseline)
        for label, batch in (("Davies, 25 °C", b25), ("ext. Debye–Hückel, 60 °C", b60)):
            ref = old.solve_balance(batch.problem)
            cur = solve_balance(batch.problem)
            t_old, t_new = alternate(lambda: old.solve_balance(batch.problem),
                                     lambda: solve_balance(batch.problem), args.rounds)
            rows.append((f"vs {args.baseline}, {label}: speed ratio (median)",
                         f"{np.median(t_old) / np.median(t_new):.2f} ×", "ratio", ""))
            rows.append(("  best of each", f"{min(t_old) / min(t_new):.2f} ×", "ratio", ""))
            rows.append(("  baseline rate (best)", f"{n / min(t_old):,.0f} streams/s", "absolute", ""))
            rows.append(("  mean iterations, baseline → now",
                         f"{ref.iterations.mean():.2f} → {cur.iterations.mean():.2f}", "info", ""))
            same = ref.status == cur.status
            both = same & (cur.status == 0)
            rows.append(("  largest |pH difference|, same status",
                         f"{np.max(np.abs(ref.ph - cur.ph)[both], initial=0.0):.1e} ({same.mean():.2%})",
                         "check", "< 1e-9"))

    if not args.quick:
        for size in (1, 10, 100, 1_000, 10_000, 100_000, 1_000_000):
            b = problem_from_columns(columns(size, SIX, rng), 25.0, "davies")
            t = timed(lambda: solve_balance(b.problem), repeat=3 if size < 1_000_000 else 1)
            rows.append((f"  batch {size:>9,}: time per stream", f"{t / size * 1e6:,.2f} µs", "scaling", "flat from 1e4"))
        base = None
        for k in (1, 2, 4, 6, 8, 12):
            b = problem_from_columns(columns(20_000, TWELVE[:k], rng), 25.0, "davies")
            t = timed(lambda: solve_balance(b.problem))
            base = base or t
            rows.append((f"  {k:>2} systems: time relative to 1", f"{t / base:.2f}", "scaling", "≈ linear"))

    width = max(len(r[0]) for r in rows)
    import models.solver

    print(f"cores: {os.cpu_count()}, streams: {n:,}, loop sample: {idx.size}, solver: {models.solver.__file__}")
    print(f"{'figure'.ljust(width)} | {'measured':>18} | {'kind':8} | target")
    print("-" * (width + 48))
    for name, val, kind, target in rows:
        print(f"{name.ljust(width)} | {val:>18} | {kind:8} | {target}")


if __name__ == "__main__":
    main()
