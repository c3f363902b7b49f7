"""Historian back-fill: a plant historian's export solved column-wise, chunk by chunk.

A historian export has a timestamp column and one column per analyte tag. A small
mapping file (YAML or JSON) says which column is which composition entry::

    timestamp: Timestamp                      # required: copied to the output first
    temperature_c: {column: TT-401.PV, default: 20.0}   # or a number for every row
    activity_model: davies                    # ideal | davies | extended_debye_huckel
    co2_partial_pressure_atm: 0.00042         # optional: open to a gas phase
    passthrough: [SamplePoint]                # optional columns copied to the output
    composition:
      - {column: AI-401.NA, name: Na+, unit: mg/L}
      - {column: AI-402.CA, name: Ca2+, unit: mg/L, default: 35.0}   # used for empty cells

Each chunk is parsed into columns; rows with a missing (and no default), non-numeric,
non-finite, negative or out-of-range value are separated out and reported (row number,
column, reason); the good rows go to ``models.columns`` in one array solve. A row whose
equilibrium cannot be trusted is reported with the solver's reason, never written as a
number. Memory is bounded by the chunk size: the input is read, solved and written one
chunk at a time (in-process, ``threads`` neighbouring chunks at once, written in order).

A chunk is parsed and its output joined by pyarrow where that gives the same bytes as
Python's csv module (``service.historian_arrow``: plain chunks, pyarrow installed), else
by the Python path here; numbers are written by ``service.historian_format`` (exactly
``'%.10g'``). The same :func:`solve_chunk` solves a chunk in-process and on a Dask worker
(``service.historian_dask``, via :func:`solve_bytes`), so both paths give the same rows.
"""

from __future__ import annotations

import collections
import csv
import functools
import io
import itertools
import json
import math
import sys
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any

import numpy as np
from numpy.typing import NDArray

from models.activity import VALIDITY_LIMIT_MOL_KG
from models.columns import problem_from_columns, solve_columns
from models.derived import TOTAL_ENDPOINT_PH
from models.equilibrium import failure_message
from models.errors import InputError
from models.solver import STATUS_MESSAGES
from models.stream import ACTIVITY_MODELS
from models.thermo import load_database
from models.units import UNITS
from service import historian_arrow
from service.historian_format import format_g10_str  # '%.10g': far finer than any model's accuracy

__all__ = [
    "DEFAULT_THREADS",
    "RESULT_COLUMNS",
    "VALUE_MAX",
    "ChunkResult",
    "ColumnSpec",
    "MappingError",
    "Mapping_",
    "Progress",
    "RowError",
    "RunSummary",
    "describe",
    "is_parquet",
    "load_mapping",
    "output_header",
    "parse_mapping",
    "read_csv_chunks",
    "read_parquet_chunks",
    "run_local",
    "solve_bytes",
    "solve_chunk",
    "solve_rows",
    "solve_text",
    "split_lines",
]

#: Largest composition value accepted [in its unit], as in the HTTP schema.
VALUE_MAX = 1.0e6
TEMPERATURE_RANGE_C = (0.0, 100.0)
CO2_MAX_ATM = 10.0

#: Result columns written after the timestamp and passed-through columns.
RESULT_COLUMNS: tuple[str, ...] = (
    "row",
    "ok",
    "ph",
    "ionic_strength_mol_l",
    "buffer_capacity_mmol_l_per_ph",
    "alkalinity_total_mg_l_as_caco3",
    "alkalinity_phenolphthalein_mg_l_as_caco3",
    "charge_balance_residual_mol_l",
    "solver_iterations",
    "warnings",
    "error_type",
    "error_field",
    "error_detail",
)
_NUMERIC_OUT = (
    "ph",
    "ionic_strength_mol_l",
    "buffer_capacity_mmol_l_per_ph",
    "alkalinity_total_mg_l_as_caco3",
    "alkalinity_phenolphthalein_mg_l_as_caco3",
    "charge_balance_residual_mol_l",
)


class MappingError(ValueError):
    """The mapping file, or the input's header against it, cannot be used (exit code 2)."""


@dataclass(frozen=True, slots=True)
class ColumnSpec:
    """One input column feeding a stream field: its column, and the default for empty cells."""

    column: str | None
    default: float | None = None


@dataclass(frozen=True, slots=True)
class Entry:
    """A composition entry read from a column [unit]."""

    column: str
    name: str
    unit: str
    default: float | None = None


@dataclass(frozen=True, slots=True)
class Mapping_:
    """A validated mapping file."""

    timestamp: str
    composition: tuple[Entry, ...]
    temperature_c: ColumnSpec = ColumnSpec(None, 25.0)
    activity_model: str = "davies"
    co2_partial_pressure_atm: float | None = None
    passthrough: tuple[str, ...] = ()

    def input_columns(self) -> tuple[str, ...]:
        """Every column the mapping reads, in output order first."""
        cols = [self.timestamp, *self.passthrough]
        if self.temperature_c.column is not None:
            cols.append(self.temperature_c.column)
        cols.extend(e.column for e in self.composition)
        return tuple(dict.fromkeys(cols))


def _num(value: Any, where: str, *, lo: float, hi: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise MappingError(f"{where}: {value!r} is not a finite number")
    if not lo <= value <= hi:
        raise MappingError(f"{where}: {value!r} is outside [{lo:g}, {hi:g}]")
    return float(value)


def _col(value: Any, where: str) -> str:
    if not isinstance(value, str) or not value.strip():
        raise MappingError(f"{where}: expected a column name (a non-empty string), got {value!r}")
    return value


def parse_mapping(doc: Any) -> Mapping_:
    """Validate a mapping document (the parsed YAML/JSON); :class:`MappingError` says what is wrong."""
    if not isinstance(doc, dict):
        raise MappingError("the mapping must be an object with 'timestamp' and 'composition'")
    known = {"timestamp", "temperature_c", "activity_model", "co2_partial_pressure_atm", "passthrough", "composition"}
    extra = sorted(set(doc) - known)
    if extra:
        raise MappingError(f"unknown mapping key(s) {', '.join(map(repr, extra))}; known: {', '.join(sorted(known))}")
    if "timestamp" not in doc:
        raise MappingError("'timestamp': missing (the name of the timestamp column)")
    timestamp = _col(doc["timestamp"], "timestamp")
    t_lo, t_hi = TEMPERATURE_RANGE_C
    raw_t = doc.get("temperature_c", 25.0)
    if isinstance(raw_t, dict):
        bad = sorted(set(raw_t) - {"column", "default"})
        if bad:
            raise MappingError(f"temperature_c: unknown key(s) {', '.join(map(repr, bad))}")
        col = _col(raw_t.get("column"), "temperature_c.column")
        default = raw_t.get("default")
        temp = ColumnSpec(col, None if default is None else _num(default, "temperature_c.default", lo=t_lo, hi=t_hi))
    else:
        temp = ColumnSpec(None, _num(raw_t, "temperature_c", lo=t_lo, hi=t_hi))
    model = doc.get("activity_model", "davies")
    if model not in ACTIVITY_MODELS:
        raise MappingError(f"activity_model: {model!r} is not one of {', '.join(ACTIVITY_MODELS)}")
    pco2 = doc.get("co2_partial_pressure_atm")
    if pco2 is not None:
        pco2 = _num(pco2, "co2_partial_pressure_atm", lo=0.0, hi=CO2_MAX_ATM)
    passthrough = doc.get("passthrough", [])
    if not isinstance(passthrough, list):
        raise MappingError("passthrough: expected a list of column names")
    passthrough = [_col(c, f"passthrough[{i}]") for i, c in enumerate(passthrough)]
    comp = doc.get("composition")
    if not isinstance(comp, list) or not comp:
        raise MappingError("composition: expected a non-empty list of {column, name, unit[, default]}")
    entries: list[Entry] = []
    for i, item in enumerate(comp):
        where = f"composition[{i}]"
        if not isinstance(item, dict):
            raise MappingError(f"{where}: expected {{column, name, unit[, default]}}")
        bad = sorted(set(item) - {"column", "name", "unit", "default"})
        if bad:
            raise MappingError(f"{where}: unknown key(s) {', '.join(map(repr, bad))}")
        unit = item.get("unit")
        if unit not in UNITS:
            raise MappingError(f"{where}.unit: {unit!r} is not one of {', '.join(UNITS)}")
        default = item.get("default")
        entries.append(
            Entry(
                _col(item.get("column"), f"{where}.column"),
                _col(item.get("name"), f"{where}.name").strip(),
                unit,
                None if default is None else _num(default, f"{where}.default", lo=0.0, hi=VALUE_MAX),
            )
        )
    names = [e.name for e in entries]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise MappingError(f"composition: {', '.join(map(repr, dup))} mapped more than once")
    mapping = Mapping_(timestamp, tuple(entries), temp, model, pco2, tuple(passthrough))
    _check_chemistry(mapping)
    return mapping


def _check_chemistry(mapping: Mapping_) -> None:
    """Names and units the core accepts: one trial row of ones through the column builder."""
    for e in mapping.composition:
        try:
            problem_from_columns({e.name: (np.ones(1), e.unit)}, 25.0, mapping.activity_model)
        except (InputError, ValueError) as exc:
            raise MappingError(f"composition entry {e.name!r} ({e.column!r}, {e.unit!r}): {exc}") from None


def load_mapping(path: Path) -> Mapping_:
    """Read and validate a mapping file (``.json``, else YAML)."""
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise MappingError(f"{path}: cannot read the mapping file ({exc})") from None
    try:
        if path.suffix.lower() == ".json":
            doc = json.loads(text)
        else:
            import yaml

            doc = yaml.safe_load(text)
    except Exception as exc:  # noqa: BLE001 - any parser error is a bad file
        raise MappingError(f"{path}: not a valid {'JSON' if path.suffix.lower() == '.json' else 'YAML'} file ({exc})") from None
    try:
        return parse_mapping(doc)
    except MappingError as exc:
        raise MappingError(f"{path}: {exc}") from None


def output_header(mapping: Mapping_) -> list[str]:
    """Columns of the output CSV: timestamp, passed-through columns, :data:`RESULT_COLUMNS`."""
    return [mapping.timestamp, *mapping.passthrough, *RESULT_COLUMNS]


@dataclass(frozen=True, slots=True)
class RowError:
    """One bad row: its number (1 = first data row), the column(s) and the reason."""

    row: int
    column: str
    reason: str
    kind: str = "validation-error"


def describe(err: RowError) -> str:
    """``row N: column 'X': reason`` for the terminal."""
    return f"row {err.row}: column {err.column!r}: {err.reason}"


@dataclass(slots=True)
class ChunkResult:
    """A solved chunk or partition: the output CSV (UTF-8 bytes, no header) and its bad rows."""

    data: bytes
    rows: int
    errors: list[RowError] = field(default_factory=list)

    @property
    def text(self) -> str:
        """The output CSV as text."""
        return self.data.decode("utf-8")


_Bad = dict[int, list[tuple[str, str]]]


def _floats(cells: Sequence[str], column: str, default: float | None, bad: _Bad) -> tuple[NDArray, NDArray]:
    """Python's float() of each cell (empty → default); the cells parsed (not reported)."""
    try:
        values = np.array(cells, dtype=np.float64)
    except ValueError:
        values = np.empty(len(cells))
        for i, cell in enumerate(cells):
            text = cell.strip()
            if text == "":
                if default is None:
                    bad.setdefault(i, []).append((column, "value is missing (and the mapping gives no default)"))
                    values[i] = np.nan
                else:
                    values[i] = default
                continue
            try:
                values[i] = float(text)
            except ValueError:
                bad.setdefault(i, []).append((column, f"{text!r} is not a number"))
                values[i] = np.nan
                continue
        checked = np.ones(len(cells), dtype=bool)
        checked[[i for i in bad if any(c == column for c, _ in bad[i])]] = False
    else:
        checked = np.ones(len(cells), dtype=bool)
    return values, checked


def _parse_column(
    cells: Sequence[str], column: str, default: float | None, lo: float, hi: float, unit: str,
    bad: _Bad, values: NDArray[np.float64] | None = None,
) -> NDArray[np.float64]:
    """Floats of one column; bad cells go to ``bad[i]`` as (column, reason) and become NaN.

    ``values``: the cells already parsed (every one a finite number), e.g. by pyarrow.
    """
    if values is None:
        values, checked = _floats(cells, column, default, bad)
    else:
        checked = np.ones(values.size, dtype=bool)
    finite = np.isfinite(values)
    for i in np.flatnonzero(checked & ~finite):
        bad.setdefault(int(i), []).append((column, f"{cells[i].strip()!r} is not a finite number"))
    out_of_range = checked & finite & ((values < lo) | (values > hi))
    for i in np.flatnonzero(out_of_range):
        v = float(values[i])
        if unit == "°C":
            why = f"{v:g} °C is outside {lo:g}–{hi:g} °C"
        elif v < lo:
            why = f"{v:g} {unit} is negative"
        else:
            why = f"{v:g} {unit} is above the largest accepted value ({hi:g} {unit})"
        bad.setdefault(int(i), []).append((column, why))
    return values


def _warnings(
    mapping: Mapping_, names: Sequence[str], t: NDArray[np.float64], res: Mapping[str, NDArray], ok: NDArray[np.bool_]
) -> list[str]:
    """Per-row warnings (the same conditions the per-stream solve warns about)."""
    n = t.size
    parts: dict[int, list[str]] = {}  # only the rows that have warnings
    db = load_database()
    for name in names:
        sysd = db.systems.get(name)
        if sysd is None:
            continue
        for k, step in enumerate(sysd.steps):
            if step.fit is None:
                continue
            outside = (t < step.fit.tmin_c) | (t > step.fit.tmax_c)
            for i in np.flatnonzero(outside & ok):
                parts.setdefault(int(i), []).append(f"{name}: pK{k + 1} is extrapolated beyond the temperature range of its fit")
    if mapping.co2_partial_pressure_atm is not None and "carbonate" in names:
        for i in np.flatnonzero(ok):
            parts.setdefault(int(i), []).append("the carbonate total of the analysis is replaced by equilibrium with the gas phase")
    ph = res["ph"]
    for i in np.flatnonzero(ok & (ph < TOTAL_ENDPOINT_PH)):
        parts.setdefault(int(i), []).append(f"pH is below the {TOTAL_ENDPOINT_PH} end point: total alkalinity is 0 (mineral acidity)")
    limit = VALIDITY_LIMIT_MOL_KG[mapping.activity_model]
    # ionic strength of the solver is molal; the result column is per litre (÷ density ≈ 1).
    ionic = res["ionic_strength_mol_kg"]
    for i in np.flatnonzero(ok & (ionic > limit)):
        parts.setdefault(int(i), []).append(
            f"ionic strength {ionic[i]:.3g} mol/kg is above the {limit:g} mol/kg validity limit "
            f"of the {mapping.activity_model} activity model: treat the pH as approximate"
        )
    out = [""] * n
    for i, p in parts.items():
        out[i] = " | ".join(p)
    return out


def _csv_column(cells: Sequence[str]) -> list[str]:
    """Cells of a passed-through column, quoted where CSV needs it."""
    joined = "".join(cells)
    if any(c in joined for c in ',"\r\n'):
        return [_csv_cell(c) for c in cells]
    return list(cells)


def _csv_cell(text: str) -> str:
    if any(c in text for c in ',"\r\n'):
        return '"' + text.replace('"', '""') + '"'
    return text


@dataclass(slots=True)
class _Solved:
    """A chunk's results: the numbers of its solved rows and its sparse text columns."""

    n: int
    first_row: int
    errors: list[RowError]
    ok: NDArray[np.bool_]  # (n,) solved rows
    solved_rows: NDArray[np.int_]  # indices of the solved rows
    numbers: dict[str, NDArray[np.float64]]  # _NUMERIC_OUT columns at solved_rows
    checked_rows: NDArray[np.int_]  # rows that went to the solver (with an iteration count)
    iterations: NDArray[np.int_]  # at checked_rows
    text: dict[str, list[str] | None]  # warnings, error_*: n CSV cells each, None if all empty


def _solve_values(
    n: int, temperature: NDArray, values: dict[str, NDArray], bad: _Bad, mapping: Mapping_, first_row: int
) -> _Solved:
    """Solve the good rows of a parsed chunk; the result and error columns."""
    good = np.ones(n, dtype=bool)
    good[list(bad)] = False
    gi = np.flatnonzero(good)
    text: dict[str, list[str] | None] = {c: None for c in ("warnings", "error_type", "error_field", "error_detail")}

    def cells(name: str) -> list[str]:
        col = text[name]
        if col is None:
            col = text[name] = [""] * n
        return col

    errors: list[RowError] = []
    for i, reasons in sorted(bad.items()):
        number = first_row + i
        errors.extend(RowError(number, c, why) for c, why in reasons)
        cells("error_type")[i] = "validation-error"
        cells("error_field")[i] = _csv_cell("; ".join(dict.fromkeys(c for c, _ in reasons)))
        cells("error_detail")[i] = _csv_cell("; ".join(f"{c}: {why}" for c, why in reasons))
    ok_all = np.zeros(n, dtype=bool)
    numbers: dict[str, NDArray] = {c: np.empty(0) for c in _NUMERIC_OUT}
    solved_rows = np.array([], dtype=np.intp)
    iterations = np.array([], dtype=np.int64)
    if gi.size:
        batch = problem_from_columns(
            {e.name: (values[e.name][gi], e.unit) for e in mapping.composition},
            temperature[gi],
            mapping.activity_model,
            co2_partial_pressure_atm=mapping.co2_partial_pressure_atm,
        )
        res = solve_columns(batch)
        out_cols = dict(res)
        out_cols["ionic_strength_mol_kg"] = res["ionic_strength_mol_l"] / batch.density_kg_l
        status = res["status"]
        solved = status == STATUS_MESSAGES[0]
        warn = _warnings(mapping, [e.name for e in mapping.composition], temperature[gi], out_cols, solved)
        solved_rows = gi[solved]
        ok_all[solved_rows] = True
        numbers = {c: out_cols[c][solved] for c in _NUMERIC_OUT}
        iterations = np.asarray(out_cols["iterations"])
        for k, w in enumerate(warn):
            if w:
                cells("warnings")[int(gi[k])] = _csv_cell(w)
        codes = {v: c for c, v in STATUS_MESSAGES.items()}
        for k in np.flatnonzero(~solved):
            i, s = int(gi[k]), str(status[k])
            why = f"{s}: {failure_message(codes[s])}"
            errors.append(RowError(first_row + i, "(stream)", why, "solve-failed"))
            cells("error_type")[i] = "solve-failed"
            cells("error_detail")[i] = _csv_cell(why)
        errors.sort(key=lambda e: e.row)
    return _Solved(n, first_row, errors, ok_all, solved_rows, numbers, gi, iterations, text)


def _parse_rows(
    rows: list[list[str]], header: Sequence[str], mapping: Mapping_
) -> tuple[dict[str, Sequence[str]], NDArray, dict[str, NDArray], _Bad]:
    """Cells of the mapped columns, temperature, composition values and bad rows of parsed CSV rows."""
    n = len(rows)
    width = len(header)
    bad: _Bad = {}
    ragged: _Bad = {}
    if set(map(len, rows)) - {width}:
        for i, r in enumerate(rows):
            if len(r) != width:
                ragged[i] = [("(row)", f"has {len(r)} fields, the header has {width}")]
                rows[i] = (r + [""] * width)[:width]
    index = {c: header.index(c) for c in mapping.input_columns()}
    cols = list(zip(*rows)) if n else [() for _ in header]
    cell = {c: cols[j] for c, j in index.items()}
    temperature, values = _parse_values(n, mapping, cell, {}, bad)
    bad.update(ragged)  # a ragged row is reported for its shape, not for the cells padded in
    return cell, temperature, values, bad


def _parse_values(
    n: int, mapping: Mapping_, cell: Mapping[str, Sequence[str]], parsed: Mapping[str, NDArray], bad: _Bad
) -> tuple[NDArray, dict[str, NDArray]]:
    """Temperature and composition columns (``parsed``: columns already parsed, all finite)."""
    t_spec = mapping.temperature_c
    if t_spec.column is None:
        temperature = np.full(n, t_spec.default)
    else:
        c = t_spec.column
        temperature = _parse_column(cell.get(c, ()), c, t_spec.default, *TEMPERATURE_RANGE_C, "°C", bad, parsed.get(c))
    values = {
        e.name: _parse_column(cell.get(e.column, ()), e.column, e.default, 0.0, VALUE_MAX, e.unit, bad, parsed.get(e.column))
        for e in mapping.composition
    }
    return temperature, values


def _lines_python(lead: list[list[str]], sol: _Solved) -> bytes:
    """The output lines of a solved chunk, joined in Python."""
    n = sol.n
    blank = [""] * n
    numbers = []
    for c in _NUMERIC_OUT:
        col = np.full(n, "", dtype=object)
        col[sol.solved_rows] = format_g10_str(sol.numbers[c])
        numbers.append(col.tolist())
    iters = np.full(n, "", dtype=object)
    iters[sol.checked_rows] = [str(v) for v in sol.iterations.tolist()]
    columns = [
        *lead,
        [str(sol.first_row + i) for i in range(n)],
        np.where(sol.ok, "true", "false").tolist(),
        *numbers,
        iters.tolist(),
        *(sol.text[c] or blank for c in ("warnings", "error_type", "error_field", "error_detail")),
    ]
    lines = list(map(",".join, zip(*columns)))
    return ("\n".join(lines) + ("\n" if lines else "")).encode("utf-8")


def solve_rows(rows: list[list[str]], header: Sequence[str], mapping: Mapping_, first_row: int) -> ChunkResult:
    """Solve one chunk of parsed CSV rows (``first_row`` = number of ``rows[0]``)."""
    cell, temperature, values, bad = _parse_rows(rows, header, mapping)
    sol = _solve_values(len(rows), temperature, values, bad, mapping, first_row)
    lead = [_csv_column(cell[c]) for c in (mapping.timestamp, *mapping.passthrough)]
    return ChunkResult(_lines_python(lead, sol), sol.n, sol.errors)


def solve_chunk(data: bytes, lines: int, header: Sequence[str], mapping: Mapping_, first_row: int) -> ChunkResult:
    """Solve one chunk of CSV data lines (``lines`` of them, UTF-8 bytes): with pyarrow's
    parser and array formatting where the chunk is plain CSV (no quotes, no bare carriage
    returns, no NUL, every row the header's width), else with Python's csv module. Both
    give the same bytes."""
    if historian_arrow.usable(data):
        res = historian_arrow.solve_chunk(data, lines, header, mapping, first_row)
        if res is not None:
            return res
    rows = list(csv.reader(io.StringIO(data.decode("utf-8"))))
    return solve_rows(rows, header, mapping, first_row)


def split_lines(data: bytes, chunk_size: int) -> Iterator[tuple[bytes, int]]:
    """(bytes, line count) of consecutive pieces of ``chunk_size`` lines (the last may be shorter)."""
    view = np.frombuffer(data, dtype=np.uint8)
    ends = np.flatnonzero(view == 10)
    start = 0
    for k in range(chunk_size - 1, ends.size, chunk_size):
        end = int(ends[k]) + 1
        yield data[start:end], chunk_size
        start = end
    if start < len(data):
        rest = ends.size % chunk_size if ends.size else 0
        yield data[start:], rest + (0 if data.endswith(b"\n") else 1)


def solve_bytes(data: bytes, header: Sequence[str], mapping: Mapping_, first_row: int, chunk_size: int) -> ChunkResult:
    """Solve CSV data lines (no header) chunk by chunk; the bytes of a partition or a chunk."""
    parts: list[bytes] = []
    errors: list[RowError] = []
    rows_done = 0
    for piece, lines in split_lines(data, chunk_size):
        res = solve_chunk(piece, lines, header, mapping, first_row + rows_done)
        parts.append(res.data)
        errors.extend(res.errors)
        rows_done += res.rows
    return ChunkResult(b"".join(parts), rows_done, errors)


def solve_text(text: str, header: Sequence[str], mapping: Mapping_, first_row: int, chunk_size: int) -> ChunkResult:
    """Solve CSV data lines (no header) chunk by chunk; the text of a partition or a chunk."""
    return solve_bytes(text.encode("utf-8"), header, mapping, first_row, chunk_size)


def check_header(header: Sequence[str], mapping: Mapping_) -> None:
    """:class:`MappingError` when a mapped column is not in the header (or twice)."""
    missing = [c for c in mapping.input_columns() if c not in header]
    if missing:
        raise MappingError(
            f"column(s) {', '.join(map(repr, missing))} of the mapping are not in the input "
            f"(its columns: {', '.join(header)})"
        )
    dup = sorted({c for c in header if list(header).count(c) > 1})
    if dup:
        raise MappingError(f"column(s) {', '.join(map(repr, dup))} appear more than once in the input header")


def read_header(handle: IO[bytes]) -> tuple[list[str], int]:
    """The CSV header row of a binary handle and its length in bytes (BOM included)."""
    line = handle.readline()
    if not line.strip():
        raise MappingError("the CSV file is empty (no header row)")
    text = line.decode("utf-8-sig")
    return next(csv.reader([text])), len(line)


def read_csv_chunks(handle: IO[bytes], chunk_size: int) -> Iterator[tuple[bytes, int]]:
    """(up to ``chunk_size`` data lines as bytes, their number) from a binary handle after its header."""
    while True:
        lines = list(itertools.islice(handle, chunk_size))
        if not lines:
            return
        yield b"".join(lines), len(lines)


def is_parquet(path: Path) -> bool:
    """A Parquet file by its suffix."""
    return path.suffix.lower() in (".parquet", ".pq")


def _parquet_rows(batch: Any, header: Sequence[str]) -> list[list[str]]:
    """A pyarrow record batch as CSV-like string rows (null → empty cell)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    cols: list[list[str]] = []
    for name in header:
        col = batch.column(name)
        if not (pa.types.is_string(col.type) or pa.types.is_large_string(col.type)):  # numbers, timestamps
            col = pc.cast(col, pa.string())
        cols.append(["" if v is None else v for v in col.to_pylist()])
    return [list(r) for r in zip(*cols)] if cols else []


def read_parquet_chunks(path: str, mapping: Mapping_, chunk_size: int, row_groups: Sequence[int] | None = None
                        ) -> Iterator[tuple[list[list[str]], list[str], int]]:
    """(rows, header, row count) per chunk of a Parquet file, row group by row group."""
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise MappingError("reading Parquet needs pyarrow: pip install -c constraints.txt -e '.[parquet]'") from None
    pf = pq.ParquetFile(path)
    header = list(mapping.input_columns())
    check_header(pf.schema_arrow.names, mapping)
    for g in row_groups if row_groups is not None else range(pf.num_row_groups):
        table = pf.read_row_group(g, columns=header)
        for start in range(0, table.num_rows, chunk_size):
            part = table.slice(start, chunk_size)
            yield _parquet_rows(part, header), header, part.num_rows


def solve_parquet(path: str, mapping: Mapping_, chunk_size: int, first_row: int, row_groups: Sequence[int]) -> ChunkResult:
    """Solve row groups of a Parquet file (a Dask partition, or the whole file in-process)."""
    parts: list[bytes] = []
    errors: list[RowError] = []
    done = 0
    for rows, header, count in read_parquet_chunks(path, mapping, chunk_size, row_groups):
        res = solve_rows(rows, header, mapping, first_row + done)
        parts.append(res.data)
        errors.extend(res.errors)
        done += count
    return ChunkResult(b"".join(parts), done, errors)


class Progress:
    """A one-line progress bar on stderr, shown only when stderr is a terminal."""

    def __init__(self, total: float, unit: str, *, stream: IO[str] | None = None, enabled: bool | None = None) -> None:
        self._stream = stream or sys.stderr
        self.enabled = self._stream.isatty() if enabled is None else enabled
        self.total = max(float(total), 1.0)
        self.unit = unit
        self.done = 0.0
        self.rows = 0
        self._start = time.monotonic()
        self._last = 0.0

    def update(self, amount: float, rows: int) -> None:
        """Advance by ``amount`` (bytes or partitions) and ``rows``; redraw at most 10 times a second."""
        self.done += amount
        self.rows += rows
        now = time.monotonic()
        if self.enabled and (now - self._last >= 0.1 or self.done >= self.total):
            self._last = now
            frac = min(self.done / self.total, 1.0)
            bar = "#" * int(frac * 30)
            rate = self.rows / max(now - self._start, 1e-9)
            self._stream.write(f"\rprotolyte solve [{bar:<30}] {frac:6.1%} {self.rows} rows, {rate:,.0f} rows/s")
            self._stream.flush()

    def close(self) -> None:
        """End the line."""
        if self.enabled:
            self._stream.write("\n")
            self._stream.flush()


@dataclass(slots=True)
class RunSummary:
    """What a run did: rows read, bad rows, files written."""

    rows: int = 0
    errors: list[RowError] = field(default_factory=list)
    outputs: list[str] = field(default_factory=list)

    @property
    def failed_rows(self) -> int:
        """Number of distinct rows that failed."""
        return len({e.row for e in self.errors})


#: Chunks solved at once by ``run_local`` unless told otherwise. More threads overlap the
#: parsing, solving and formatting of neighbouring chunks (pyarrow, and numpy on whole
#: columns, release the GIL), at the memory of one more chunk each; on the shared 2-core
#: machine two threads were not measurably faster than one, so one is the default.
DEFAULT_THREADS = 1

_Task = Callable[[], ChunkResult]


def _raise(exc: BaseException) -> ChunkResult:
    raise exc


def _in_order(tasks: Iterator[tuple[_Task, float]], threads: int) -> Iterator[tuple[ChunkResult, float]]:
    """Run the chunk tasks on ``threads`` threads, results in input order; at most
    ``threads`` + 1 chunks are in memory at once. The first chunk is solved alone, so the
    caches it fills (thermodynamic data, formula masses, formatting tables) are filled once."""
    first = next(tasks, None)
    if first is None:
        return
    yield first[0](), first[1]
    if threads <= 1:
        for task, amount in tasks:
            yield task(), amount
        return
    pending: collections.deque[tuple[Future[ChunkResult], float]] = collections.deque()
    with ThreadPoolExecutor(threads, thread_name_prefix="protolyte-solve") as pool:
        try:
            for task, amount in tasks:
                pending.append((pool.submit(task), amount))
                if len(pending) > threads:
                    fut, amt = pending.popleft()
                    yield fut.result(), amt
            while pending:
                fut, amt = pending.popleft()
                yield fut.result(), amt
        finally:
            for fut, _ in pending:
                fut.cancel()


def _csv_tasks(handle: IO[bytes], header: list[str], mapping: Mapping_, chunk_size: int) -> Iterator[tuple[_Task, float]]:
    """One task per chunk, numbered as the sequential run numbers them (a row per line,
    except where quoted fields span lines: those chunks are parsed here to count rows)."""
    first = 1
    for data, lines in read_csv_chunks(handle, chunk_size):
        if b'"' in data:
            try:
                rows = list(csv.reader(io.StringIO(data.decode("utf-8"))))
            except (UnicodeDecodeError, csv.Error) as exc:
                yield functools.partial(_raise, exc), len(data)
                return
            yield functools.partial(solve_rows, rows, header, mapping, first), len(data)
            first += len(rows)
        else:
            yield functools.partial(solve_chunk, data, lines, header, mapping, first), len(data)
            first += lines


def _parquet_tasks(path: str, mapping: Mapping_, chunk_size: int) -> Iterator[tuple[_Task, float]]:
    first = 1
    for rows, header, count in read_parquet_chunks(path, mapping, chunk_size):
        yield functools.partial(solve_rows, rows, header, mapping, first), count
        first += count


def run_local(
    input_path: Path, mapping: Mapping_, out: IO[str], *, chunk_size: int, on_error: Any = None,
    progress: Progress | None = None, threads: int = DEFAULT_THREADS,
) -> RunSummary:
    """Solve a CSV or Parquet export in this process, chunk by chunk, writing CSV to ``out``.

    ``threads`` chunks are solved at once; they are written in order, so the output is that
    of a sequential run, and memory stays bounded by ``threads`` + 1 chunks.
    """
    summary = RunSummary()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(output_header(mapping))
    raw = getattr(out, "buffer", None)  # a text file's bytes underneath: no decode/encode
    if raw is not None:
        out.flush()

    def emit(res: ChunkResult, amount: float) -> None:
        if raw is not None:
            raw.write(res.data)
        else:
            out.write(res.text)
        summary.rows += res.rows
        summary.errors.extend(res.errors)
        if on_error is not None:
            for e in res.errors:
                on_error(e)
        if progress is not None:
            progress.update(amount, res.rows)

    if is_parquet(input_path):
        for res, amount in _in_order(_parquet_tasks(str(input_path), mapping, chunk_size), threads):
            emit(res, amount)
        return summary
    with input_path.open("rb") as handle:
        header, _ = read_header(handle)
        check_header(header, mapping)
        for res, amount in _in_order(_csv_tasks(handle, header, mapping, chunk_size), threads):
            emit(res, amount)
    return summary
