"""Historian back-fill on a Dask cluster: partitions solved on the workers, written per partition.

Dask does the scheduling, the retries and the data movement; this module only says what
a partition is and what a worker does with one:

* CSV: a partition is a byte range of the input holding a whole number of chunks
  (``rows_per_partition`` data lines, a multiple of the chunk size). The client scans
  the file once for line ends to place the ranges and number the rows; each worker
  reads its own range (a path every worker can open: a shared file system, or an
  fsspec URL), solves it chunk by chunk with :func:`service.historian.solve_bytes` and
  writes ``part-NNNNN.csv`` in the output directory. Line ends inside quoted fields
  are not supported (historian exports do not have them).
* Parquet: a partition is a row group.

Chunk boundaries are the same as in-process, so the rows are the same.
Workers need Protolyte installed (the same version) to import this module.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from service.historian import (
    ChunkResult,
    Mapping_,
    MappingError,
    Progress,
    RowError,
    RunSummary,
    check_header,
    is_parquet,
    output_header,
    read_header,
    solve_bytes,
    solve_parquet,
)

__all__ = ["DaskUnavailable", "Partition", "part_name", "plan_csv", "plan_parquet", "run_dask", "solve_partition"]

_SCAN_BLOCK = 1 << 24  # 16 MiB read at a time while placing partitions


class DaskUnavailable(RuntimeError):
    """dask[distributed] is not installed."""


@dataclass(frozen=True, slots=True)
class Partition:
    """A CSV byte range [start, end) or a list of Parquet row groups, and its first row number."""

    index: int
    first_row: int
    start: int = 0
    end: int = 0
    row_groups: tuple[int, ...] = ()


def part_name(index: int) -> str:
    """File name of a partition's output."""
    return f"part-{index:05d}.csv"


def _open(path: str, mode: str = "rb") -> Any:
    if "://" in path:
        import fsspec

        return fsspec.open(path, mode).open()
    return open(path, mode)


def plan_csv(path: str, rows_per_partition: int) -> tuple[list[str], list[Partition]]:
    """The header and the partitions of a CSV file (one sequential scan for line ends)."""
    with _open(path) as handle:
        header, offset = read_header(handle)
        parts: list[Partition] = []
        start = offset
        pos = offset
        lines = 0  # data lines seen so far
        while True:
            block = handle.read(_SCAN_BLOCK)
            if not block:
                break
            ends = np.flatnonzero(np.frombuffer(block, dtype=np.uint8) == 10)
            k = 0
            while k < ends.size:
                need = rows_per_partition * (len(parts) + 1) - lines  # lines to close this partition
                if k + need - 1 < ends.size:
                    end = pos + int(ends[k + need - 1]) + 1
                    parts.append(Partition(len(parts), len(parts) * rows_per_partition + 1, start, end))
                    start = end
                    k += need
                    lines += need
                else:
                    lines += ends.size - k
                    k = ends.size
            pos += len(block)
        if pos > start:  # the last, shorter partition (its last line may lack a line end)
            parts.append(Partition(len(parts), len(parts) * rows_per_partition + 1, start, pos))
    return header, parts


def plan_parquet(path: str, row_groups_per_partition: int = 1) -> list[Partition]:
    """One partition per ``row_groups_per_partition`` row groups of a Parquet file."""
    import pyarrow.parquet as pq

    meta = pq.ParquetFile(path).metadata
    parts: list[Partition] = []
    first = 1
    for g0 in range(0, meta.num_row_groups, row_groups_per_partition):
        groups = tuple(range(g0, min(g0 + row_groups_per_partition, meta.num_row_groups)))
        parts.append(Partition(len(parts), first, row_groups=groups))
        first += sum(meta.row_group(g).num_rows for g in groups)
    return parts


def solve_partition(
    path: str, part: Partition, header: list[str], mapping: Mapping_, chunk_size: int, out_dir: str
) -> tuple[int, list[RowError], str]:
    """A worker's task: solve one partition and write its CSV; (rows, bad rows, file written).

    The file is written under a temporary name and renamed, so a retried task leaves one
    complete file.
    """
    if part.row_groups:
        res: ChunkResult = solve_parquet(path, mapping, chunk_size, part.first_row, part.row_groups)
    else:
        with _open(path) as handle:
            handle.seek(part.start)
            data = handle.read(part.end - part.start)
        res = solve_bytes(data, header, mapping, part.first_row, chunk_size)
    target = os.path.join(out_dir, part_name(part.index))
    tmp = f"{target}.{uuid.uuid4().hex}.tmp"
    import csv

    with open(tmp, "w", newline="", encoding="utf-8") as out:
        csv.writer(out, lineterminator="\n").writerow(output_header(mapping))
        out.flush()
        out.buffer.write(res.data)
    os.replace(tmp, target)
    return res.rows, res.errors, target


def _client(scheduler: str | None, n_workers: int) -> tuple[Any, Any]:
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise DaskUnavailable(
            "--dask/--scheduler need dask[distributed]: pip install -c constraints.txt -e '.[backfill]'"
        ) from None
    if scheduler in (None, "local"):
        import dask

        # Dask sets MALLOC_TRIM_THRESHOLD_ in its workers; that fixes glibc's mmap threshold,
        # so every large numpy temporary is a fresh mmap: the column solve ran 2× slower.
        environ = dict(dask.config.get("distributed.nanny.pre-spawn-environ", {}))
        environ.pop("MALLOC_TRIM_THRESHOLD_", None)
        with dask.config.set({"distributed.nanny.pre-spawn-environ": environ}):
            cluster = LocalCluster(
                n_workers=n_workers,
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                dashboard_address="127.0.0.1:0",  # its HTTP server: loopback, any free port
                silence_logs=40,
            )
        return Client(cluster), cluster
    return Client(scheduler), None


def run_dask(
    input_path: str,
    mapping: Mapping_,
    out_dir: Path,
    *,
    chunk_size: int,
    rows_per_partition: int,
    scheduler: str | None = None,
    n_workers: int = 2,
    retries: int = 2,
    on_error: Callable[[RowError], None] | None = None,
    progress_enabled: bool | None = None,
) -> RunSummary:
    """Solve ``input_path`` on a Dask cluster (``scheduler`` address, or a local one of
    ``n_workers`` processes on loopback); one output file per partition in ``out_dir``."""
    if rows_per_partition % chunk_size:
        raise MappingError(
            f"the partition size ({rows_per_partition} rows) must be a multiple of the chunk size ({chunk_size})"
        )
    if is_parquet(Path(input_path)):
        try:
            import pyarrow.parquet as pq
        except ImportError:
            raise MappingError("reading Parquet needs pyarrow: pip install -c constraints.txt -e '.[parquet]'") from None
        header = list(mapping.input_columns())
        check_header(pq.ParquetFile(input_path).schema_arrow.names, mapping)
        parts = plan_parquet(input_path)
    else:
        header, parts = plan_csv(input_path, rows_per_partition)
        check_header(header, mapping)
    out_dir.mkdir(parents=True, exist_ok=True)
    for stale in out_dir.glob("part-*.csv"):
        stale.unlink()
    from distributed import as_completed

    client, cluster = _client(scheduler, n_workers)
    summary = RunSummary()
    progress = Progress(len(parts), "partitions", enabled=progress_enabled)
    try:
        futures = [
            client.submit(
                solve_partition, input_path, part, header, mapping, chunk_size, str(out_dir),
                key=f"protolyte-solve-{part.index}-{uuid.uuid4().hex[:8]}", retries=retries, pure=False,
            )
            for part in parts
        ]
        results: dict[int, tuple[int, list[RowError], str]] = {}
        where = {f.key: i for i, f in enumerate(futures)}
        for fut in as_completed(futures):
            rows, errors, target = fut.result()
            results[where[fut.key]] = (rows, errors, target)
            progress.update(1, rows)
        progress.close()
        for i in range(len(parts)):
            rows, errors, target = results[i]
            summary.rows += rows
            summary.errors.extend(errors)
            summary.outputs.append(target)
            if on_error is not None:
                for e in errors:
                    on_error(e)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    return summary
