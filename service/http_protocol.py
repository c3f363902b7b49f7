"""uvicorn's httptools protocol with one socket write per response instead of two.

uvicorn writes the status line and headers when the app sends ``http.response.start``
and the body when it sends ``http.response.body``: two ``send()`` system calls and two
TCP segments for every small JSON answer, about a fifth of the event loop's time per
``POST /v1/equilibrium``. Here the connection's transport is wrapped so that what is
written during one step of the event loop goes out as ONE write at the end of that
step (``loop.call_soon``): headers and body together. Nothing waits on a timer; a
``close()`` or ``write_eof()`` first writes what is pending; everything else is the
real transport's. ``protolyte serve`` passes this class as uvicorn's ``http``.
"""

from __future__ import annotations

import asyncio
from typing import Any

from uvicorn.protocols.http.httptools_impl import HttpToolsProtocol as _HttpToolsProtocol

__all__ = ["HttpToolsProtocol", "WriteCoalescingTransport"]


class WriteCoalescingTransport:
    """A transport whose writes of one loop step leave as one ``write`` of the real one."""

    __slots__ = ("_loop", "_pending", "_scheduled", "_transport")

    def __init__(self, transport: asyncio.Transport, loop: asyncio.AbstractEventLoop) -> None:
        self._transport = transport
        self._loop = loop
        self._pending: list[bytes] = []
        self._scheduled = False

    def write(self, data: bytes) -> None:
        if not data:
            return
        self._pending.append(data)
        if not self._scheduled:
            self._scheduled = True
            self._loop.call_soon(self._flush)

    def writelines(self, lines: Any) -> None:
        for data in lines:
            self.write(data)

    def _flush(self) -> None:
        self._scheduled = False
        pending = self._pending
        if not pending:
            return
        data = pending[0] if len(pending) == 1 else b"".join(pending)
        pending.clear()
        if not self._transport.is_closing():
            self._transport.write(data)

    def get_write_buffer_size(self) -> int:
        return self._transport.get_write_buffer_size() + sum(len(d) for d in self._pending)

    def write_eof(self) -> None:
        self._flush()
        self._transport.write_eof()

    def close(self) -> None:
        self._flush()
        self._transport.close()

    def is_closing(self) -> bool:  # per request (uvicorn): not through __getattr__
        return self._transport.is_closing()

    def pause_reading(self) -> None:
        self._transport.pause_reading()

    def resume_reading(self) -> None:
        self._transport.resume_reading()

    def abort(self) -> None:
        self._pending.clear()
        self._transport.abort()

    def __getattr__(self, name: str) -> Any:  # is_closing, pause_reading, get_extra_info, ...
        return getattr(self._transport, name)


class HttpToolsProtocol(_HttpToolsProtocol):
    """uvicorn's httptools protocol on a :class:`WriteCoalescingTransport`."""

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        super().connection_made(WriteCoalescingTransport(transport, self.loop))  # type: ignore[arg-type]
