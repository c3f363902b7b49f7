"""The gunicorn worker class of ``protolyte serve --workers N``: uvicorn's, on uvloop and
the one-write-per-response httptools protocol (:mod:`service.http_protocol`), as the
single-process server runs. Needs the ``serve`` extra (gunicorn, uvicorn-worker)."""

from __future__ import annotations

from typing import Any

from uvicorn_worker import UvicornWorker

from service.http_protocol import HttpToolsProtocol

__all__ = ["ProtolyteWorker"]


class ProtolyteWorker(UvicornWorker):
    """``uvicorn_worker.UvicornWorker`` with uvloop and :class:`service.http_protocol.HttpToolsProtocol`."""

    CONFIG_KWARGS: dict[str, Any] = {**UvicornWorker.CONFIG_KWARGS, "loop": "uvloop", "http": HttpToolsProtocol}
