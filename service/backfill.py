"""Back-fill: streams from a JSON or CSV file solved in chunks with the vectorized core.

CSV layout (one stream per row, as a historian export looks):

* ``NAME [UNIT]`` columns are composition entries, e.g. ``Na+ [mg/L]``,
  ``carbonate [mmol/L]``, ``ammonia [mg/L as N]``; UNIT is one of ``models.units.UNITS``.
* ``temperature_c``, ``activity_model``, ``measured_ph``, ``balance_on`` and
  ``co2_partial_pressure_atm`` set those stream fields (empty = default / absent).
* Every other column (a timestamp, a sample id) is passed through to the output.

A row with a bad value is reported (row number, column, reason) and the run goes on.
Memory stays bounded: rows are read, solved and written one chunk at a time.
"""

from __future__ import annotations

import csv
import json
import math
import re
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any

from pydantic import ValidationError

from models.results import EquilibriumResult, StreamFailure
from models.stream import StreamSpec
from models.units import UNITS

from service.checks import structural_errors
from service.convert import to_response, to_spec
from service.core import Core
from service.problems import FieldError, field_errors_from_pydantic
from service.schemas import Stream

__all__ = [
    "STREAM_COLUMNS",
    "CSV_RESULT_COLUMNS",
    "Row",
    "RowOutcome",
    "ColumnMap",
    "InputFileError",
    "describe_errors",
    "parse_header",
    "read_csv_rows",
    "read_json_rows",
    "solve_rows",
    "CsvWriter",
    "JsonWriter",
]

#: CSV columns that set stream fields rather than composition entries.
STREAM_COLUMNS: tuple[str, ...] = (
    "temperature_c",
    "activity_model",
    "measured_ph",
    "balance_on",
    "co2_partial_pressure_atm",
)
_NUMERIC_STREAM_COLUMNS = ("temperature_c", "measured_ph", "co2_partial_pressure_atm")
_ENTRY_RE = re.compile(r"^\s*(?P<name>[^\[\]]+?)\s*\[(?P<unit>[^\[\]]+)\]\s*$")

#: Result columns the CSV output adds after the passed-through columns.
CSV_RESULT_COLUMNS: tuple[str, ...] = (
    "row",
    "ok",
    "ph",
    "ionic_strength_mol_l",
    "buffer_capacity_mmol_l_per_ph",
    "alkalinity_total_mg_l_as_caco3",
    "alkalinity_phenolphthalein_mg_l_as_caco3",
    "calcite_saturation_index",
    "charge_balance_residual_mol_l",
    "solver_iterations",
    "warnings",
    "error_type",
    "error_field",
    "error_detail",
)


class InputFileError(ValueError):
    """The input file as a whole cannot be read (bad header, not JSON, …)."""


@dataclass(frozen=True, slots=True)
class ColumnMap:
    """How a CSV header maps to stream fields."""

    entries: tuple[tuple[str, str, str], ...]  # (column, name, unit)
    stream_fields: tuple[str, ...]
    passthrough: tuple[str, ...]


def parse_header(header: Sequence[str]) -> ColumnMap:
    """Classify CSV columns; raise :class:`InputFileError` for a ``NAME [UNIT]`` with an unknown unit."""
    entries: list[tuple[str, str, str]] = []
    stream_fields: list[str] = []
    passthrough: list[str] = []
    for col in header:
        m = _ENTRY_RE.match(col)
        if m:
            unit = m.group("unit").strip()
            if unit not in UNITS:
                raise InputFileError(
                    f"column {col!r}: unit {unit!r} is not one of {', '.join(UNITS)}"
                )
            entries.append((col, m.group("name").strip(), unit))
        elif col.strip() in STREAM_COLUMNS:
            stream_fields.append(col)
        else:
            passthrough.append(col)
    if not entries:
        raise InputFileError("no composition columns: name them like 'Na+ [mg/L]' or 'carbonate [mmol/L]'")
    return ColumnMap(tuple(entries), tuple(stream_fields), tuple(passthrough))


@dataclass(slots=True)
class Row:
    """One input record: its number, the stream as a JSON-like dict, how to name its fields."""

    number: int
    data: Any
    passthrough: dict[str, str] = field(default_factory=dict)
    pointer_to_column: dict[str, str] = field(default_factory=dict)
    error: FieldError | None = None


@dataclass(slots=True)
class RowOutcome:
    """A row's result or its error."""

    row: Row
    result: dict[str, Any] | None = None
    errors: list[FieldError] = field(default_factory=list)
    error_type: str = ""

    @property
    def ok(self) -> bool:
        """True when the row was solved."""
        return self.result is not None


def _number(text: str) -> float:
    value = float(text)
    if not math.isfinite(value):
        raise ValueError("not finite")
    return value


def _csv_row(number: int, record: dict[str, str | None], cmap: ColumnMap, missing: str) -> Row:
    row = Row(number=number, data=None)
    row.passthrough = {c: (record.get(c) or "") for c in cmap.passthrough}
    stream: dict[str, Any] = {"composition": []}
    for col in cmap.stream_fields:
        key = col.strip()
        raw = (record.get(col) or "").strip()
        row.pointer_to_column["/" + key] = col
        if raw == "":
            continue
        if key in _NUMERIC_STREAM_COLUMNS:
            try:
                value: Any = _number(raw)
            except ValueError:
                row.error = FieldError(pointer="/" + key, detail=f"{raw!r} is not a finite number", code="not_a_number")
                return row
            if key == "co2_partial_pressure_atm":
                stream["gas"] = {"co2_partial_pressure_atm": value}
                row.pointer_to_column["/gas/co2_partial_pressure_atm"] = col
                continue
            stream[key] = value
        else:
            stream[key] = raw
    for col, name, unit in cmap.entries:
        raw = (record.get(col) or "").strip()
        if raw == "":
            if missing == "omit":
                continue
            pointer = f"/composition/{len(stream['composition'])}/value"
            row.pointer_to_column[pointer] = col
            row.error = FieldError(pointer=pointer, detail="value is missing", code="missing")
            return row
        index = len(stream["composition"])
        for part in ("", "/name", "/value", "/unit"):
            row.pointer_to_column[f"/composition/{index}{part}"] = col
        try:
            value = _number(raw)
        except ValueError:
            row.error = FieldError(
                pointer=f"/composition/{index}/value", detail=f"{raw!r} is not a finite number", code="not_a_number"
            )
            return row
        stream["composition"].append({"name": name, "value": value, "unit": unit})
    row.data = stream
    return row


def read_csv_rows(handle: IO[str], missing: str = "error") -> tuple[ColumnMap, Iterator[Row]]:
    """The column map and a lazy iterator of rows (row 1 = first data row)."""
    reader = csv.DictReader(handle)
    if reader.fieldnames is None:
        raise InputFileError("the CSV file is empty (no header row)")
    cmap = parse_header(list(reader.fieldnames))

    def rows() -> Iterator[Row]:
        for number, record in enumerate(reader, start=1):
            yield _csv_row(number, record, cmap, missing)

    return cmap, rows()


def read_json_rows(path: Path) -> Iterator[Row]:
    """Rows of a JSON file holding a list of streams or ``{"items": [...]}``."""
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputFileError(f"{path}: not a readable JSON file ({exc})") from None
    items = doc.get("items") if isinstance(doc, dict) else doc
    if not isinstance(items, list):
        raise InputFileError(f"{path}: expected a JSON list of streams or an object with 'items'")
    for number, item in enumerate(items, start=1):
        yield Row(number=number, data=item)


def _column(row: Row, pointer: str) -> str | None:
    parts = pointer.split("/")
    while parts:
        col = row.pointer_to_column.get("/".join(parts))
        if col is not None:
            return col
        parts.pop()
    return None


def _validate(row: Row) -> tuple[Stream | None, list[FieldError]]:
    if row.error is not None:
        return None, [row.error]
    try:
        stream = Stream.model_validate(row.data)
    except ValidationError as exc:
        return None, field_errors_from_pydantic(exc.errors(include_url=False))
    errors = structural_errors(stream)
    return (None, errors) if errors else (stream, [])


def _chunks(rows: Iterable[Row], size: int) -> Iterator[list[Row]]:
    chunk: list[Row] = []
    for row in rows:
        chunk.append(row)
        if len(chunk) >= size:
            yield chunk
            chunk = []
    if chunk:
        yield chunk


def solve_rows(rows: Iterable[Row], core: Core, chunk_size: int, version: str) -> Iterator[RowOutcome]:
    """Validate and solve rows chunk by chunk (one ``solve_many`` per chunk), order kept."""
    for chunk in _chunks(rows, chunk_size):
        outcomes = [RowOutcome(row=r) for r in chunk]
        specs: list[StreamSpec] = []
        where: list[int] = []
        for i, outcome in enumerate(outcomes):
            stream, errors = _validate(outcome.row)
            if stream is None:
                outcome.errors = errors
                outcome.error_type = "validation-error"
            else:
                specs.append(to_spec(stream))
                where.append(i)
        results: list[EquilibriumResult | StreamFailure] = core.solve_many(specs) if specs else []
        for i, res in zip(where, results):
            outcome = outcomes[i]
            if isinstance(res, StreamFailure):
                outcome.errors = [FieldError(pointer=res.field, detail=res.message, code=res.reason or None)]
                outcome.error_type = {"input": "input-error", "solve": "solve-failed"}.get(res.kind, res.kind)
            else:
                outcome.result = to_response(res, version).model_dump(mode="json")
        yield from outcomes


def describe_errors(outcome: RowOutcome) -> str:
    """``row N: column 'X' (/pointer): reason; …`` for the terminal."""
    parts = []
    for e in outcome.errors:
        col = _column(outcome.row, e.pointer)
        where = f"column {col!r} ({e.pointer})" if col else (e.pointer or "(stream)")
        parts.append(f"{where}: {e.detail}")
    return f"row {outcome.row.number}: " + "; ".join(parts)


class CsvWriter:
    """Writes outcomes as CSV: passed-through columns, then :data:`CSV_RESULT_COLUMNS`."""

    def __init__(self, handle: IO[str], passthrough: Sequence[str]) -> None:
        self._passthrough = list(passthrough)
        self._writer = csv.DictWriter(handle, fieldnames=self._passthrough + list(CSV_RESULT_COLUMNS))
        self._writer.writeheader()

    def write(self, outcome: RowOutcome) -> None:
        """Write one row."""
        out: dict[str, Any] = {c: outcome.row.passthrough.get(c, "") for c in self._passthrough}
        out["row"] = outcome.row.number
        out["ok"] = "true" if outcome.ok else "false"
        r = outcome.result
        if r is not None:
            out.update(
                ph=r["ph"],
                ionic_strength_mol_l=r["ionic_strength_mol_l"],
                buffer_capacity_mmol_l_per_ph=r["buffer_capacity_mmol_l_per_ph"],
                alkalinity_total_mg_l_as_caco3=r["alkalinity"]["total_mg_l_as_caco3"],
                alkalinity_phenolphthalein_mg_l_as_caco3=r["alkalinity"]["phenolphthalein_mg_l_as_caco3"],
                calcite_saturation_index=r.get("calcite_saturation_index") if r.get("calcite_saturation_index") is not None else "",
                charge_balance_residual_mol_l=r["charge_balance_residual_mol_l"],
                solver_iterations=r["model"]["solver_iterations"],
                warnings=" | ".join(r["warnings"]),
            )
        else:
            first = outcome.errors[0] if outcome.errors else FieldError(pointer="", detail="failed")
            col = _column(outcome.row, first.pointer)
            out.update(
                error_type=outcome.error_type,
                error_field=col or first.pointer,
                error_detail="; ".join(e.detail for e in outcome.errors),
            )
        self._writer.writerow(out)

    def close(self) -> None:
        """Nothing to finish for CSV."""


class JsonWriter:
    """Writes outcomes as one JSON array, streamed item by item."""

    def __init__(self, handle: IO[str]) -> None:
        self._handle = handle
        self._first = True
        handle.write("[\n")

    def write(self, outcome: RowOutcome) -> None:
        """Write one item: ``{row, ok, result | errors, passthrough}``."""
        item: dict[str, Any] = {"row": outcome.row.number, "ok": outcome.ok}
        if outcome.result is not None:
            item["result"] = outcome.result
        else:
            item["error_type"] = outcome.error_type
            item["errors"] = [e.model_dump(exclude_none=True) for e in outcome.errors]
        if outcome.row.passthrough:
            item["passthrough"] = outcome.row.passthrough
        self._handle.write(("" if self._first else ",\n") + json.dumps(item, ensure_ascii=False))
        self._first = False

    def close(self) -> None:
        """Close the array."""
        self._handle.write("\n]\n")
