"""One JSON object per line on stdout (orjson), for access and error logs.

Access lines carry ``timestamp``, ``level``, ``logger``, ``message``, ``request_id``,
``method``, ``route``, ``status``, ``duration_seconds`` and, for batches, ``batch_size``.
uvicorn's own access log is turned off so nothing is logged twice.
"""

from __future__ import annotations

import asyncio
import atexit
import logging
import sys
import time
from datetime import UTC, datetime
from typing import Any, TextIO

import orjson

__all__ = [
    "ACCESS_LOGGER",
    "JsonFormatter",
    "configure_logging",
    "flush_access_lines",
    "skip_unlogged_record_fields",
    "write_access_line",
]

ACCESS_LOGGER = "protolyte.access"
_FIELDS = (
    "request_id", "method", "route", "status", "duration_seconds", "batch_size",
    "error_type", "client",
)
_HANDLER_NAME = "protolyte-json"


class JsonFormatter(logging.Formatter):
    """Render a log record as one JSON object."""

    def format(self, record: logging.LogRecord) -> str:
        out: dict[str, Any] = {
            "timestamp": datetime.fromtimestamp(record.created, tz=UTC).isoformat(timespec="milliseconds"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
        }
        for key in _FIELDS:
            value = record.__dict__.get(key)
            if value is not None:
                out[key] = value
        if record.exc_info and record.exc_info[0] is not None:
            out["exception"] = self.formatException(record.exc_info)
        return orjson.dumps(out, default=str).decode()


_ROOT = logging.getLogger()
_INFO = logging.INFO
_handler: logging.StreamHandler | None = None  # the handler configure_logging installed
_pending: list[str] = []  # access lines of the current event-loop step, not yet written
_flush_scheduled = False


def flush_access_lines() -> None:
    """Write the access lines collected so far with one write and one flush."""
    global _flush_scheduled
    _flush_scheduled = False
    handler = _handler
    if not _pending or handler is None:
        _pending.clear()
        return
    text = "".join(_pending)
    _pending.clear()
    handler.acquire()
    try:
        handler.stream.write(text)
        handler.flush()
    except Exception:  # noqa: BLE001 -- as logging.Handler.handleError: never break the request
        if logging.raiseExceptions:
            sys.stderr.write("protolyte: could not write access log lines\n")
    finally:
        handler.release()


atexit.register(flush_access_lines)


def write_access_line(logger: logging.Logger, fields: dict[str, Any]) -> bool:
    """Write an INFO access line as the JSON handler would, without a ``LogRecord``.

    Only when the configuration is exactly what :func:`configure_logging` set up (the
    access logger propagates to a root with just the JSON handler, no filters, INFO
    enabled); else returns False and the caller logs through ``logging`` as usual. The
    line is the same JSON as :class:`JsonFormatter` makes of ``logger.info("request",
    extra=fields)``. Lines of one event-loop step leave in one write at its end, so a
    crash loses at most that step's lines.
    """
    global _flush_scheduled
    handler = _handler
    if (
        handler is None
        or logger.handlers
        or logger.filters
        or not logger.propagate
        or logger.disabled
        or logger.parent is not _ROOT
        or len(_ROOT.handlers) != 1
        or _ROOT.handlers[0] is not handler
        or _ROOT.filters
        or handler.filters
        or handler.level > _INFO
        or type(handler.formatter) is not JsonFormatter
        or not logger.isEnabledFor(_INFO)
    ):
        return False
    out: dict[str, Any] = {
        "timestamp": datetime.fromtimestamp(time.time(), tz=UTC).isoformat(timespec="milliseconds"),
        "level": "info",
        "logger": logger.name,
        "message": "request",
    }
    for key in _FIELDS:
        value = fields.get(key)
        if value is not None:
            out[key] = value
    _pending.append(orjson.dumps(out, default=str).decode() + handler.terminator)
    if not _flush_scheduled:
        try:
            loop = asyncio.get_running_loop()
        except RuntimeError:
            flush_access_lines()
            return True
        _flush_scheduled = True
        loop.call_soon(flush_access_lines)
    return True


def configure_logging(level: str = "INFO", stream: TextIO | None = None) -> None:
    """Send every log record (also uvicorn's and gunicorn's) as JSON lines to ``stream``."""
    global _handler
    flush_access_lines()
    root = logging.getLogger()
    for handler in list(root.handlers):
        if handler.get_name() == _HANDLER_NAME:
            root.removeHandler(handler)
    handler = logging.StreamHandler(stream or sys.stdout)
    handler.set_name(_HANDLER_NAME)
    handler.setFormatter(JsonFormatter())
    root.addHandler(handler)
    _handler = handler
    root.setLevel(level)
    for name in ("uvicorn", "uvicorn.error", "gunicorn.error"):
        lg = logging.getLogger(name)
        lg.handlers.clear()
        lg.propagate = True
    access = logging.getLogger("uvicorn.access")
    access.handlers.clear()
    access.propagate = False
    access.disabled = True


def skip_unlogged_record_fields() -> None:
    """Stop collecting, for every log record, what the JSON lines never show.

    The logging HOWTO's optimisation knobs: no caller frame lookup (``funcName``,
    ``lineno``), no thread, process or multiprocessing names. About a fifth of the cost
    of the access line written for every request. Process-wide, so only the server
    processes call it (``protolyte serve``, the gunicorn configuration), not tests.
    """
    logging._srcfile = None  # type: ignore[attr-defined]
    logging.logThreads = False
    logging.logProcesses = False
    logging.logMultiprocessing = False
