"""Demo data shared by the back-fill tests and benchmark: the historian export of an
invented site, the Ashcombe Fold dye works final-effluent sump (temperature and six
analyser tags, one sample a minute). Invented numbers, for the demo only."""

from __future__ import annotations

from pathlib import Path

import numpy as np

MAPPING = """\
# Ashcombe Fold dye works, final-effluent sump
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
UNITS = {"Na+": "mg/L", "Ca2+": "mg/L", "Cl-": "mg/L", "carbonate": "mmol/L", "ammonia": "mg/L as N", "sulfate": "mg/L"}


def generate(path: Path, n: int, seed: int = 8) -> None:
    """n one-minute samples of the sump (a day cycle plus analyser noise), written in
    blocks so memory stays bounded for 10^6 rows."""
    rng = np.random.default_rng(seed)
    with path.open("w", encoding="utf-8", newline="") as out:
        out.write(HEADER + "\n")
        block = 100_000
        for a in range(0, n, block):
            minutes = np.arange(a, min(a + block, n))
            k = minutes.size
            day = np.sin(2 * np.pi * minutes / 1440.0)
            cols = [
                14.0 + 6.0 * day + rng.normal(0, 0.3, k),  # TT-401 [°C]
                60 + 25 * day + rng.normal(0, 3, k),  # Na+ [mg/L]
                38 + rng.normal(0, 2, k),  # Ca2+ [mg/L]
                85 + 30 * day + rng.normal(0, 4, k),  # Cl- [mg/L]
                np.abs(2.2 + 0.6 * day + rng.normal(0, 0.1, k)),  # TIC [mmol/L]
                np.abs(1.2 + rng.normal(0, 0.2, k)),  # NH3-N [mg/L]
                np.abs(48 + rng.normal(0, 5, k)),  # SO4 [mg/L]
            ]
            stamps = np.datetime_as_string(np.datetime64("2024-01-01T00:00") + minutes.astype("timedelta64[m]"))
            table = np.column_stack([np.char.mod("%.4g", c) for c in cols]).tolist()
            out.write("\n".join(f"{s}Z,sump," + ",".join(r) for s, r in zip(stamps, table)) + "\n")
