"""One JSON object per line on stdout (orjson), for access and error logs.

Access lines carry ``timestamp``, ``level``, ``logger``, ``message``, ``request_id``,
``method``, ``route``, ``status``, ``duration_seconds`` and, for batches, ``batch_size``.
uvicorn's own access log is turned off so nothing is logged twice.
"""

from __future__ import annotations

import logging
import sys
from datetime import UTC, datetime
from typing import Any, TextIO

import orjson

__all__ = ["ACCESS_LOGGER", "JsonFormatter", "configure_logging", "skip_unlogged_record_fields"]

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


def configure_logging(level: str = "INFO", stream: TextIO | None = None) -> None:
    """Send every log record (also uvicorn's and gunicorn's) as JSON lines to ``stream``."""
    root = logging.getLogger()
    for handler in list(root.handlers):
        if handler.get_name() == _HANDLER_NAME:
            root.removeHandler(handler)
    handler = logging.StreamHandler(stream or sys.stdout)
    handler.set_name(_HANDLER_NAME)
    handler.setFormatter(JsonFormatter())
    root.addHandler(handler)
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
