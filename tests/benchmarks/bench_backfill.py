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

import numpy as np

MAPPING = """\
timestamp: Timestamp
temperature_c: {column: TT-401.PV, default: 20.0}
activity_model: davies
passthrough: [Sample.Point]
composition:
  - {column: AI-401.NA, name: Na+, unit: mg/L}
  - {column: AI-402.CA, name: Ca2+, unit: mg/L, default: 35.0}
  - {column: AI-403.CL, name: Cl-, unit: mg/L}
  - {column: AI-404.TIC, name: carbonate, unit: mmol/L}
  - {column: AI-405.NH3, name: ammonia, unit: mg/L as N}
  - {column: AI-406.SO4, name: sulfate, unit: mg/L}
"""
HEADER = "Timestamp,Sample.Point,TT-401.PV,AI-401.NA,AI-402.CA,AI-403.CL,AI-404.TIC,AI-405.NH3,AI-406.SO4"


def generate(path: Path, n: int, seed: int = 8) -> None:
    """n one-minute samples of the sump (a day cycle plus analyser noise)."""
    rng = np.random.default_rng(seed)
    with path.open("w", encoding="utf-8", newline="") as out:
        out.write(HEADER + "\n")
        block = 100_000
        for a in range(0, n, block):
            minutes = np.arange(a, min(a + block, n))
            k = minutes.size
            day = np.sin(2 * np.pi * minutes / 1440.0)
            cols = [
                14.0 + 6.0 * day + rng.normal(0, 0.3, k),
                60 + 25 * day + rng.normal(0, 3, k),
                38 + rng.normal(0, 2, k),
                85 + 30 * day + rng.normal(0, 4, k),
                np.abs(2.2 + 0.6 * day + rng.normal(0, 0.1, k)),
                np.abs(1.2 + rng.normal(0, 0.2, k)),
                np.abs(48 + rng.normal(0, 5, k)),
            ]
            stamps = np.datetime_as_string(np.datetime64("2024-01-01T00:00") + minutes.astype("timedelta64[m]"))
            table = np.column_stack([np.char.mod("%.4g", c) for c in cols]).tolist()
            out.write("\n".join(f"{s}Z,sump," + ",".join(r) for s, r in zip(stamps, table)) + "\n")


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
