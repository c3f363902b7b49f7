"""gunicorn configuration for ``protolyte serve --workers N`` (N > 1).

Workers are ``service.gunicorn_worker.ProtolyteWorker`` (``uvicorn_worker.UvicornWorker``
on uvloop and the one-write-per-response protocol of ``service.http_protocol``). Prometheus multiprocess mode: the
directory in ``PROMETHEUS_MULTIPROC_DIR`` (default: a fresh one under the temp dir)
is wiped and created when the master starts, and a dead worker's files are marked
in ``child_exit``. SIGTERM stops gracefully (``graceful_timeout``). With
``PROTOLYTE_CPU_AFFINITY`` set, each worker holds a slot (the lowest no live worker
holds, so a replacement takes the CPU of the worker it replaces) and pins itself to that
slot's CPU after the fork (``service.affinity``).
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import Any

from service.affinity import check_cpu_affinity, free_slot, pin_worker
from service.logging import skip_unlogged_record_fields
from service.metrics import prepare_multiprocess_dir
from service.settings import Settings

__all__ = [
    "accesslog", "bind", "child_exit", "graceful_timeout", "on_starting", "post_fork", "pre_fork", "timeout",
    "worker_class", "workers",
]

_settings = Settings.from_env()

bind = [f"{_settings.host}:{_settings.port}"]
workers = _settings.workers
worker_class = "service.gunicorn_worker.ProtolyteWorker"
graceful_timeout = 30
timeout = 60
keepalive = 5
accesslog = None
errorlog = "-"
loglevel = _settings.log_level.lower()


def _prepare_multiproc_dir() -> str:
    path = os.environ.get("PROMETHEUS_MULTIPROC_DIR") or str(Path(tempfile.gettempdir()) / "protolyte-metrics")
    return prepare_multiprocess_dir(path)


_prepare_multiproc_dir()
check_cpu_affinity(_settings.cpu_affinity)  # a setting this host cannot honour stops the master
skip_unlogged_record_fields()  # in the master; the forked workers inherit it


def on_starting(server: Any) -> None:
    """Master start: make sure the metrics directory is empty and exists."""
    _prepare_multiproc_dir()


def child_exit(server: Any, worker: Any) -> None:
    """A worker died: drop its live-gauge files from the multiprocess directory."""
    from prometheus_client import multiprocess

    multiprocess.mark_process_dead(worker.pid)


def pre_fork(server: Any, worker: Any) -> None:
    """Master, before a worker forks: give it the lowest CPU slot no live worker holds."""
    worker.cpu_slot = free_slot({getattr(w, "cpu_slot", None) for w in server.WORKERS.values()})


def post_fork(server: Any, worker: Any) -> None:
    """In the new worker: pin it to its slot's CPU (when ``PROTOLYTE_CPU_AFFINITY`` says so)."""
    pin_worker(_settings.cpu_affinity, worker.cpu_slot)
