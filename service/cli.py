"""The ``protolyte`` command: ``serve``, ``openapi``, ``solve``.

* ``protolyte serve`` — run the service (127.0.0.1:8000 by default; ``PROTOLYTE_*``
  variables and the options override); ``--workers N`` > 1 runs gunicorn.
* ``protolyte openapi [--output openapi/openapi.json] [--check]`` — write (or check)
  the OpenAPI document of the service with built-in default settings.
* ``protolyte solve INPUT [--output OUT] [--format csv|json]`` — solve streams from a
  JSON or CSV file without a server (historian back-fill), chunk by chunk.

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

__all__ = ["main", "build_parser"]

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

    api = sub.add_parser("openapi", help="write the OpenAPI document")
    api.add_argument("--output", type=Path, default=DEFAULT_OPENAPI_PATH, help="file to write (default %(default)s)")
    api.add_argument("--check", action="store_true", help="only check that the file is up to date")

    solve = sub.add_parser("solve", help="solve streams from a JSON or CSV file")
    solve.add_argument("input", type=Path, help="JSON (list of streams) or CSV (one stream per row)")
    solve.add_argument("--output", type=Path, help="output file (default: standard output)")
    solve.add_argument("--format", choices=("csv", "json"), help="output format (default: that of the input)")
    solve.add_argument("--chunk-size", type=int, default=5000, help="rows solved per core call (default %(default)s)")
    solve.add_argument(
        "--missing",
        choices=("error", "omit"),
        default="error",
        help="an empty composition cell: report the row (error, default) or leave the entry out (omit)",
    )
    return parser


def _serve(args: argparse.Namespace) -> int:
    for name, value in (("HOST", args.host), ("PORT", args.port), ("WORKERS", args.workers), ("LOG_LEVEL", args.log_level)):
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

    from service.logging import configure_logging
    from service.metrics import multiprocess_dir, prepare_multiprocess_dir

    directory = multiprocess_dir()
    if directory:  # one process, but the deployment asked for multiprocess files
        prepare_multiprocess_dir(directory)

    configure_logging(settings.log_level)
    uvicorn.run(
        "service.app:app",
        host=settings.host,
        port=settings.port,
        access_log=False,
        log_config=None,
        lifespan="on",
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
    from service import backfill
    from service.core import default_core
    from service.state import service_version

    if args.chunk_size < 1:
        print("protolyte: --chunk-size must be at least 1", file=sys.stderr)
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
