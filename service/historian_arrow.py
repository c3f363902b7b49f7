"""The back-fill's pyarrow path: a chunk of plain CSV parsed by pyarrow's multi-threaded
reader and its output lines joined by pyarrow's string kernels, giving byte for byte the
output of the Python path in ``service.historian``.

Used only where the two parsers agree by construction: pyarrow installed, and a chunk
without quote characters, NUL bytes or carriage returns other than in CRLF line ends,
every row as wide as the header (pyarrow rejects a ragged row; the chunk then goes to the
Python path, which reports it row by row), no empty line (pyarrow skips those, so the row
count differs from the line count) and valid UTF-8. Numbers are taken from pyarrow's
parser only where a whole column parses as finite numbers (its accepted syntax is a subset
of Python's float(), with the same correctly rounded values); any other column goes
through the Python cell-by-cell parser and its messages.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from service.historian_format import format_g10

if TYPE_CHECKING:
    from service.historian import ChunkResult, Mapping_

try:
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.csv as pacsv
except ImportError:  # the optional [parquet] extra: without it the Python path does it all
    pa = pc = pacsv = None

__all__ = ["solve_chunk", "usable"]

#: pyarrow allocations of the back-fill: the system allocator, which returns a finished
#: chunk's memory (pyarrow's default mimalloc pool kept ~50 MB more resident).
_POOL = pa.system_memory_pool() if pa is not None else None

#: Rows joined per pyarrow call (keeps a string array far below its 2 GiB offset limit).
JOIN_ROWS = 1 << 20


def usable(data: bytes) -> bool:
    """This chunk may go to pyarrow (see the module doc); the rest is checked while parsing."""
    return (
        pa is not None
        and b'"' not in data
        and b"\0" not in data
        and data.count(b"\r") == data.count(b"\r\n")
    )


def _read(data: bytes, header: Sequence[str], needed: list[str]) -> Any:
    try:
        return pacsv.read_csv(
            pa.BufferReader(data),
            read_options=pacsv.ReadOptions(column_names=list(header), use_threads=True),
            parse_options=pacsv.ParseOptions(newlines_in_values=False, ignore_empty_lines=True),
            convert_options=pacsv.ConvertOptions(
                column_types={c: pa.string() for c in needed}, include_columns=needed,
                strings_can_be_null=False, check_utf8=True,
            ),
            memory_pool=_POOL,
        )
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None


def _fixed_strings(chars: np.ndarray, length: np.ndarray, rows: np.ndarray, n: int) -> Any:
    """A string array of n cells: the NUL-padded texts ``chars`` at ``rows``, empty elsewhere."""
    width = int(length.max()) if length.size else 0
    if width == 0:
        return pa.scalar("")
    full = np.zeros((n, width), dtype=np.uint8)
    full[rows] = chars[:, :width]
    fixed = pa.FixedSizeBinaryArray.from_buffers(pa.binary(width), n, [None, pa.py_buffer(full)])
    text = pc.cast(pc.cast(fixed, pa.binary(), memory_pool=_POOL), pa.string(), memory_pool=_POOL)
    return pc.utf8_rtrim(text, characters="\0", memory_pool=_POOL)


def _join(columns: list[Any], n: int) -> bytes:
    """Cells joined by ',' and each line ended by '\\n', as UTF-8 bytes."""
    parts = []
    for start in range(0, n, JOIN_ROWS):
        cols = [c.slice(start, JOIN_ROWS) if isinstance(c, pa.Array) else c for c in columns]
        line = pc.binary_join_element_wise(*cols, ",", memory_pool=_POOL)
        line = pc.binary_join_element_wise(line, pa.scalar(""), "\n", memory_pool=_POOL)
        _, offsets, values = line.buffers()
        off = np.frombuffer(offsets, dtype=np.int32, count=line.offset + len(line) + 1)
        parts.append(values.to_pybytes()[off[line.offset]: off[line.offset + len(line)]])
    return b"".join(parts)


def solve_chunk(data: bytes, lines: int, header: Sequence[str], mapping: Mapping_, first_row: int) -> ChunkResult | None:
    """The chunk solved, or None where it must go to the Python path."""
    from service import historian as h

    if not data.isascii():
        try:
            data.decode("utf-8")
        except UnicodeDecodeError:
            return None  # the Python path raises it
    needed = list(mapping.input_columns())
    table = _read(data, header, needed)
    if table is None or table.num_rows != lines:
        return None
    n = lines
    numeric = [e.column for e in mapping.composition]
    if mapping.temperature_c.column is not None:
        numeric.append(mapping.temperature_c.column)
    parsed: dict[str, np.ndarray] = {}
    cells: dict[str, list[str]] = {}
    for c in dict.fromkeys(numeric):
        col = table.column(c)
        try:
            v = pc.cast(col, pa.float64(), memory_pool=_POOL).to_numpy()
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            v = None
        if v is not None and np.isfinite(v).all():
            parsed[c] = v
        else:
            cells[c] = col.to_pylist()
    bad: dict[int, list[tuple[str, str]]] = {}
    temperature, values = h._parse_values(n, mapping, cells, parsed, bad)
    sol = h._solve_values(n, temperature, values, bad, mapping, first_row)

    columns: list[Any] = [table.column(c).combine_chunks(memory_pool=_POOL) for c in (mapping.timestamp, *mapping.passthrough)]
    columns.append(pc.cast(pa.array(np.arange(first_row, first_row + n, dtype=np.int64)), pa.string(), memory_pool=_POOL))
    columns.append(pc.if_else(pa.array(sol.ok), pa.scalar("true"), pa.scalar("false"), memory_pool=_POOL))
    for c in h._NUMERIC_OUT:
        columns.append(_fixed_strings(*format_g10(sol.numbers[c]), sol.solved_rows, n))  # none solved: all ""
    if sol.checked_rows.size == n:
        columns.append(pc.cast(pa.array(sol.iterations.astype(np.int64)), pa.string(), memory_pool=_POOL))
    else:
        it = np.zeros(n, dtype=np.int64)
        it[sol.checked_rows] = sol.iterations
        mask = np.zeros(n, dtype=bool)
        mask[sol.checked_rows] = True
        columns.append(pc.if_else(pa.array(mask), pc.cast(pa.array(it), pa.string(), memory_pool=_POOL), pa.scalar(""),
                                  memory_pool=_POOL))
    for c in ("warnings", "error_type", "error_field", "error_detail"):
        col = sol.text[c]
        columns.append(pa.scalar("") if col is None else pa.array(col, type=pa.string(), memory_pool=_POOL))
    return h.ChunkResult(_join(columns, n) if n else b"", n, sol.errors)
