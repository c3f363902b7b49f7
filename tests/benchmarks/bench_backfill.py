"""Back-fill throughput: ``protolyte solve EXPORT --mapping MAP`` on a 1 000 000-row CSV.

Generates an invented plant's historian export (the *Ashcombe Fold dye works* final
effluent sump: temperature and six analyser tags, one sample a minute, about 1.9 years),
then runs, each as its own process, the in-process path and the Dask path (a local
cluster of worker processes on 127.0.0.1), and prints rows/s and the peak RSS of the
in-process run (memory stays bounded by the chunk size, not the file size).

    python tests/benchmarks/bench_backfill.py [--rows 1000000] [--chunk-size 20000] [--workers 2]
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path


sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from demo_sump import MAPPING, generate  # noqa: E402


def run(cmd: list[str]) -> tuple[float, str]:
    start = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, check=False)
    elapsed = time.perf_counter() - start
    if proc.returncode not in (0, 1):
        raise SystemExit(f"{' '.join(cmd)} failed ({proc.returncode}):\n{proc.stderr}")
    return elapsed, proc.stderr.strip().splitlines()[-1]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--chunk-size", type=int, default=20_000)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    protolyte = [sys.executable, "-m", "service.cli", "solve"]
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        src, mapping = d / "sump.csv", d / "sump.yaml"
        mapping.write_text(MAPPING, encoding="utf-8")
        t0 = time.perf_counter()
        generate(src, args.rows)
        size_mb = src.stat().st_size / 1e6
        print(f"generated {args.rows} rows ({size_mb:.0f} MB) in {time.perf_counter() - t0:.1f} s; "
              f"{os.cpu_count()} cores")
        base = [str(src), "--mapping", str(mapping), "--chunk-size", str(args.chunk_size), "--no-progress"]
        t_local, line_local = run([*protolyte, *base, "--output", str(d / "out.csv")])
        rss_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
        t_dask, line_dask = run([*protolyte, *base, "--output", str(d / "parts"), "--dask", "--workers", str(args.workers)])
        print(f"in-process: {line_local}")
        print(f"dask:       {line_dask}")
        print()
        print("| path | rows | wall time [s] | rows/s | peak RSS [MB] |")
        print("| --- | --- | --- | --- | --- |")
        print(f"| in-process, chunk {args.chunk_size} | {args.rows} | {t_local:.1f} | {args.rows / t_local:,.0f} | {rss_mb:.0f} |")
        print(f"| Dask, local cluster, {args.workers} worker processes | {args.rows} | {t_dask:.1f} | "
              f"{args.rows / t_dask:,.0f} | (workers not measured) |")


if __name__ == "__main__":
    main()
