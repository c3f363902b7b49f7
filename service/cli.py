"""The ``protolyte`` command: ``serve``, ``openapi``, ``solve``.

* ``protolyte serve`` — run the service (127.0.0.1:8000 by default; ``PROTOLYTE_*``
  variables and the options override); ``--workers N`` > 1 runs gunicorn.
* ``protolyte openapi [--output openapi/openapi.json] [--check]`` — write (or check)
  the OpenAPI document of the service with built-in default settings.
* ``protolyte solve INPUT [--output OUT] [--format csv|json]`` — solve streams from a
  JSON or CSV file without a server, chunk by chunk (one stream per row, columns named
  ``NAME [UNIT]``).
* ``protolyte solve EXPORT --mapping MAP.yaml [--output OUT]`` — historian back-fill: a
  CSV (or Parquet, with pyarrow) export with a timestamp column and one column per tag,
  the mapping saying which column is which entry (``service.historian``), solved
  column-wise; ``--dask`` / ``--scheduler ADDRESS`` runs it on a Dask cluster, one output
  file per partition in the ``--output`` directory (``service.historian_dask``).

Exit codes of ``solve``: 0 every row solved, 1 some rows failed (the output is
still complete), 2 the input could not be read.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence
from pathlib import Path

from service.settings import LOG_LEVELS, Settings, SettingsError

__all__ = ["build_parser", "main"]

DEFAULT_OPENAPI_PATH = Path("openapi/openapi.json")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``protolyte`` command."""
    parser = argparse.ArgumentParser(prog="protolyte", description="Protolyte pH prediction service.")
    sub = parser.add_subparsers(dest="command", required=True)

    serve = sub.add_parser("serve", help="run the HTTP service")
    serve.add_argument("--host", help="bind address (default PROTOLYTE_HOST or 127.0.0.1)")
    serve.add_argument("--port", type=int, help="TCP port (default PROTOLYTE_PORT or 8000)")
    serve.add_argument("--workers", type=int, help="worker processes (default PROTOLYTE_WORKERS or 1)")
    serve.add_argument("--log-level", choices=[lv.lower() for lv in LOG_LEVELS], help="log level")
    serve.add_argument(
        "--cpu-affinity",
        help="off, auto or CPU numbers like 0,2: one CPU per worker process (default PROTOLYTE_CPU_AFFINITY or off; see service/affinity.py)",
    )

    api = sub.add_parser("openapi", help="write the OpenAPI document")
    api.add_argument("--output", type=Path, default=DEFAULT_OPENAPI_PATH, help="file to write (default %(default)s)")
    api.add_argument("--check", action="store_true", help="only check that the file is up to date")

    solve = sub.add_parser("solve", help="solve streams from a JSON or CSV file, or a historian export")
    solve.add_argument("input", type=Path, help="JSON (list of streams), CSV (one stream per row) or, with --mapping, a historian export (CSV or Parquet)")
    solve.add_argument("--output", type=Path, help="output file (default: standard output); with --dask/--scheduler, a directory of part-NNNNN.csv files")
    solve.add_argument("--format", choices=("csv", "json"), help="output format (default: that of the input; --mapping writes CSV)")
    solve.add_argument("--chunk-size", type=int, help="rows solved per core call (default 5000; 20000 with --mapping)")
    solve.add_argument("--mapping", type=Path, help="historian mapping file (YAML or JSON): which column is which composition entry, unit, default")
    solve.add_argument("--dask", action="store_true", help="with --mapping: run on a local Dask cluster of worker processes on 127.0.0.1")
    solve.add_argument("--scheduler", metavar="ADDRESS", help="with --mapping: run on the Dask cluster at ADDRESS (tcp://host:port; 'local' = --dask)")
    solve.add_argument("--workers", type=int, default=2, help="worker processes of the local Dask cluster (default %(default)s)")
    solve.add_argument("--partition-rows", type=int, help="rows per Dask partition, a multiple of --chunk-size (default 4 chunks)")
    solve.add_argument("--threads", type=int, help="with --mapping, in-process: chunks solved at once on threads, written in order (default 1; more overlap parsing, solving and writing where cores are idle, one more chunk in memory each)")
    solve.add_argument("--progress", action=argparse.BooleanOptionalAction, default=None, help="progress bar on stderr (default: when stderr is a terminal)")
    solve.add_argument(
        "--missing",
        choices=("error", "omit"),
        default="error",
        help="an empty composition cell: report the row (error, default) or leave the entry out (omit)",
    )
    return parser


def _serve(args: argparse.Namespace) -> int:
    options = (
        ("HOST", args.host), ("PORT", args.port), ("WORKERS", args.workers), ("LOG_LEVEL", args.log_level),
        ("CPU_AFFINITY", args.cpu_affinity),
    )
    for name, value in options:
        if value is not None:
            os.environ["PROTOLYTE_" + name] = str(value).upper() if name == "LOG_LEVEL" else str(value)
    settings = Settings.from_env()
    if settings.workers > 1:
        try:
            import gunicorn  # noqa: F401
            import uvicorn_worker  # noqa: F401
        except ImportError:
            print("protolyte: --workers > 1 needs gunicorn: pip install -c constraints.txt -e '.[serve]'", file=sys.stderr)
            return 2
        conf = Path(__file__).with_name("gunicorn_conf.py")
        argv = [sys.executable, "-m", "gunicorn", "-c", str(conf), "service.app:app"]
        os.execv(sys.executable, argv)
    import uvicorn

    from service.affinity import AffinityError, pin_worker
    from service.http_protocol import HttpToolsProtocol
    from service.logging import configure_logging, skip_unlogged_record_fields
    from service.metrics import multiprocess_dir, prepare_multiprocess_dir

    directory = multiprocess_dir()
    if directory:  # one process, but the deployment asked for multiprocess files
        prepare_multiprocess_dir(directory)

    configure_logging(settings.log_level)
    skip_unlogged_record_fields()
    try:
        pin_worker(settings.cpu_affinity, 0)  # before uvicorn starts threads: they inherit it
    except AffinityError as exc:
        print(f"protolyte: {exc}", file=sys.stderr)
        return 2
    uvicorn.run(
        "service.app:app",
        host=settings.host,
        port=settings.port,
        access_log=False,
        log_config=None,
        lifespan="on",
        loop="uvloop",  # C event loop and HTTP parser (runtime dependencies), one socket write
        http=HttpToolsProtocol,  # per response: far less CPU than asyncio + h11
        timeout_graceful_shutdown=30,
    )
    return 0


def _openapi(args: argparse.Namespace) -> int:
    from service.app import create_app
    from service.openapi import dumps_openapi, write_openapi

    doc = create_app(Settings()).openapi()
    if args.check:
        current = args.output.read_text(encoding="utf-8") if args.output.exists() else ""
        if current != dumps_openapi(doc):
            print(f"protolyte: {args.output} is out of date; run 'protolyte openapi'", file=sys.stderr)
            return 1
        return 0
    write_openapi(doc, args.output)
    print(f"wrote {args.output}", file=sys.stderr)
    return 0


def _solve(args: argparse.Namespace) -> int:
    if args.chunk_size is not None and args.chunk_size < 1:
        print("protolyte: --chunk-size must be at least 1", file=sys.stderr)
        return 2
    if args.threads is not None and args.threads < 1:
        print("protolyte: --threads must be at least 1", file=sys.stderr)
        return 2
    if args.mapping is not None:
        return _solve_historian(args)
    from service import backfill
    from service.core import default_core
    from service.state import service_version

    if args.dask or args.scheduler:
        print("protolyte: --dask/--scheduler need a historian --mapping file", file=sys.stderr)
        return 2
    args.chunk_size = args.chunk_size or 5000
    if args.input.suffix.lower() in (".parquet", ".pq"):
        print("protolyte: a Parquet export needs a --mapping file", file=sys.stderr)
        return 2
    is_csv = args.input.suffix.lower() == ".csv"
    fmt = args.format or ("csv" if is_csv else "json")
    core = default_core()
    handle_in = None
    try:
        if is_csv:
            handle_in = args.input.open(newline="", encoding="utf-8-sig")
            cmap, rows = backfill.read_csv_rows(handle_in, args.missing)
            passthrough: Sequence[str] = cmap.passthrough
        else:
            rows = backfill.read_json_rows(args.input)
            passthrough = ()
    except (OSError, backfill.InputFileError) as exc:
        print(f"protolyte: {exc}", file=sys.stderr)
        return 2
    out = args.output.open("w", newline="", encoding="utf-8") if args.output else sys.stdout
    writer: backfill.CsvWriter | backfill.JsonWriter = (
        backfill.CsvWriter(out, passthrough) if fmt == "csv" else backfill.JsonWriter(out)
    )
    solved = failed = 0
    try:
        for outcome in backfill.solve_rows(rows, core, args.chunk_size, service_version()):
            writer.write(outcome)
            if outcome.ok:
                solved += 1
            else:
                failed += 1
                print(backfill.describe_errors(outcome), file=sys.stderr)
        writer.close()
    finally:
        if handle_in is not None:
            handle_in.close()
        if args.output:
            out.close()
    print(f"protolyte: {solved} rows solved, {failed} failed", file=sys.stderr)
    return 0 if failed == 0 else 1


def _solve_historian(args: argparse.Namespace) -> int:
    from service import historian

    chunk = args.chunk_size or 20_000
    if args.format == "json":
        print("protolyte: --mapping writes CSV (--format json is for stream files)", file=sys.stderr)
        return 2
    distributed = bool(args.dask or args.scheduler)
    if distributed and args.output is None:
        print("protolyte: --dask/--scheduler write one file per partition: give an --output directory", file=sys.stderr)
        return 2

    def report(err: historian.RowError) -> None:
        print(historian.describe(err), file=sys.stderr)

    try:
        mapping = historian.load_mapping(args.mapping)
        if distributed:
            from service import historian_dask

            summary = historian_dask.run_dask(
                str(args.input), mapping, args.output, chunk_size=chunk,
                rows_per_partition=args.partition_rows or 4 * chunk,
                scheduler=args.scheduler, n_workers=args.workers, on_error=report, progress_enabled=args.progress,
            )
        else:
            size = args.input.stat().st_size
            total = size
            if historian.is_parquet(args.input):
                import pyarrow.parquet as pq

                total = pq.ParquetFile(args.input).metadata.num_rows
            progress = historian.Progress(total, "bytes", enabled=args.progress)
            out = args.output.open("w", newline="", encoding="utf-8") if args.output else sys.stdout
            try:
                summary = historian.run_local(
                    args.input, mapping, out, chunk_size=chunk, on_error=report, progress=progress,
                    threads=args.threads or historian.DEFAULT_THREADS,
                )
            finally:
                progress.close()
                if args.output:
                    out.close()
    except (ImportError, RuntimeError, OSError, UnicodeDecodeError, historian.MappingError) as exc:
        # RuntimeError: dask[distributed] missing; OSError/TimeoutError: input, output or scheduler
        print(f"protolyte: {exc}", file=sys.stderr)
        return 2
    failed = summary.failed_rows
    where = f" into {len(summary.outputs)} partition files in {args.output}" if distributed else ""
    print(f"protolyte: {summary.rows - failed} rows solved, {failed} failed{where}", file=sys.stderr)
    return 0 if failed == 0 else 1


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the console script."""
    args = build_parser().parse_args(argv)
    try:
        if args.command == "serve":
            return _serve(args)
        if args.command == "openapi":
            return _openapi(args)
        return _solve(args)
    except SettingsError as exc:
        print(f"protolyte: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    raise SystemExit(main())
