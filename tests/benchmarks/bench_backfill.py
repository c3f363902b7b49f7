"""Back-fill throughput: ``protolyte solve EXPORT --mapping MAP`` on a 1 000 000-row CSV.

Generates an invented plant's historian export (the *Ashcombe Fold dye works* final
effluent sump: temperature and six analyser tags, one sample a minute, about 1.9 years),
then runs, each as its own process, the in-process path and the Dask path (a local
cluster of worker processes on 127.0.0.1), and prints rows/s and the peak RSS of each
in-process run (memory stays bounded by the chunk size, not the file size).

With ``--baseline DIR`` (another checkout of the project, e.g. ``git worktree add
/tmp/bf-base <commit>``) the in-process runs of that tree and of this one alternate,
``--rounds`` times each, on the same file, and the ratio of their median times is
printed: on a shared machine the ratio is the figure to compare, not the absolute rates.

    python tests/benchmarks/bench_backfill.py [--rows 1000000] [--chunk-size 20000] [--workers 2]
        [--threads N] [--baseline DIR --rounds 3] [--no-dask]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path


sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from _server import ROOT, tree_env  # noqa: E402
from demo_sump import MAPPING, generate  # noqa: E402


# Runs ``python -m service.cli ARGS`` and reports the process's own peak RSS (VmHWM; the
# rusage maximum would include the forking benchmark's memory, which survives exec).
_WRAPPER = """
import atexit, runpy, sys
def hwm():
    try:
        kb = next(int(l.split()[1]) for l in open('/proc/self/status') if l.startswith('VmHWM:'))
    except (OSError, StopIteration):
        import resource
        kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    import resource
    ru = resource.getrusage(resource.RUSAGE_SELF)
    sys.stderr.write(f'\\ncpu-s {ru.ru_utime + ru.ru_stime:.2f}\\npeak-rss-kb {kb}\\n')
atexit.register(hwm)
sys.argv = ['protolyte', *sys.argv[1:]]
runpy.run_module('service.cli', run_name='__main__')
"""


def run(cmd: list[str], tree: Path) -> tuple[float, str, float, float]:
    """Wall time [s], summary line, peak RSS [MB] and CPU time [s] of ``protolyte ARGS``
    (``cmd`` = [python, -m, service.cli, ARGS…]) importing ``tree``'s code."""
    env = tree_env(tree)
    start = time.perf_counter()
    proc = subprocess.run([cmd[0], "-c", _WRAPPER, *cmd[3:]], capture_output=True, text=True, env=env, cwd=tree, check=False)
    elapsed = time.perf_counter() - start
    lines = proc.stderr.strip().splitlines()
    if proc.returncode not in (0, 1) or not lines or not lines[-1].startswith("peak-rss-kb"):
        raise SystemExit(f"{' '.join(cmd)} failed ({proc.returncode}):\n{proc.stderr}")
    summary = next((line for line in reversed(lines) if line.startswith("protolyte:")), lines[-3])
    return elapsed, summary, int(lines[-1].split()[1]) / 1024, float(lines[-2].split()[1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--chunk-size", type=int, default=20_000)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--threads", type=int, help="--threads of the in-process run (default: the CLI's)")
    ap.add_argument("--baseline", type=Path, help="another checkout whose in-process run alternates with this one")
    ap.add_argument("--rounds", type=int, default=1, help="in-process runs of each tree (default %(default)s)")
    ap.add_argument("--no-dask", action="store_true", help="skip the Dask run")
    args = ap.parse_args()
    protolyte = [sys.executable, "-m", "service.cli", "solve"]
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        src, mapping = d / "sump.csv", d / "sump.yaml"
        mapping.write_text(MAPPING, encoding="utf-8")
        t0 = time.perf_counter()
        generate(src, args.rows)
        size_mb = src.stat().st_size / 1e6
        load = os.getloadavg()[0]
        print(f"generated {args.rows} rows ({size_mb:.0f} MB) in {time.perf_counter() - t0:.1f} s; "
              f"{os.cpu_count()} cores; load average {load:.1f}")
        base = [str(src), "--mapping", str(mapping), "--chunk-size", str(args.chunk_size), "--no-progress"]
        local = [*protolyte, *base, "--output", str(d / "out.csv")]
        trees = {"this tree": ROOT}
        if args.baseline is not None:
            trees = {f"baseline {args.baseline}": args.baseline.resolve(), **trees}
        runs: dict[str, list[tuple[float, str, float, float]]] = {name: [] for name in trees}
        outputs: dict[str, bytes] = {}
        for _ in range(args.rounds):
            for name, tree in trees.items():
                extra = ["--threads", str(args.threads)] if args.threads and tree == ROOT else []
                runs[name].append(run([*local, *extra], tree))
                outputs[name] = (d / "out.csv").read_bytes()
        if len(outputs) == 2:
            print(f"outputs identical: {len(set(outputs.values())) == 1}")
        print()
        print("| path | rows | wall time [s] (median of runs) | rows/s | peak RSS [MB] | CPU time [s] (median) |")
        print("| --- | --- | --- | --- | --- | --- |")
        medians, cpu = {}, {}
        for name, rs in runs.items():
            t = statistics.median(r[0] for r in rs)
            medians[name], cpu[name] = t, statistics.median(r[3] for r in rs)
            times = ", ".join(f"{r[0]:.1f}" for r in rs)
            print(f"| in-process, chunk {args.chunk_size}, {name} | {args.rows} | {t:.1f} ({times}) | "
                  f"{args.rows / t:,.0f} | {max(r[2] for r in rs):.0f} | {cpu[name]:.1f} |")
        if not args.no_dask:
            t_dask, line_dask, _, _ = run(
                [*protolyte, *base, "--output", str(d / "parts"), "--dask", "--workers", str(args.workers)], ROOT
            )
            print(f"| Dask, local cluster, {args.workers} worker processes | {args.rows} | {t_dask:.1f} | "
                  f"{args.rows / t_dask:,.0f} | (workers not measured) | — |")
        print()
        for name, rs in runs.items():
            print(f"{name}: {rs[-1][1]}")
        if not args.no_dask:
            print(f"dask: {line_dask}")
        if len(medians) == 2:
            old, new = medians.values()
            print(f"speed-up of this tree over the baseline (ratio of median wall times): {old / new:.2f}×")
            c_old, c_new = cpu.values()
            print(f"CPU time ratio (baseline / this tree; threads add CPU, not wall time): {c_old / c_new:.2f}×")
        print(f"load average at the end {os.getloadavg()[0]:.1f} (other work on the machine slows both)")


if __name__ == "__main__":
    main()
