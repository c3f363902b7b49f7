"""One socket write per loop step: the transport wrapper of ``service.http_protocol``."""

from __future__ import annotations

import asyncio
from typing import Any

from service.http_protocol import WriteCoalescingTransport


class FakeTransport:
    def __init__(self) -> None:
        self.writes: list[bytes] = []
        self.closed = self.aborted = self.eof = False

    def write(self, data: bytes) -> None:
        assert not self.closed
        self.writes.append(bytes(data))

    def is_closing(self) -> bool:
        return self.closed

    def close(self) -> None:
        self.closed = True

    def abort(self) -> None:
        self.aborted = self.closed = True

    def write_eof(self) -> None:
        self.eof = True

    def get_write_buffer_size(self) -> int:
        return 0

    def get_extra_info(self, name: str, default: Any = None) -> Any:
        return {"peername": ("127.0.0.1", 5)}.get(name, default)


def test_writes_of_one_step_leave_as_one_write_in_order() -> None:
    async def run() -> FakeTransport:
        real = FakeTransport()
        t = WriteCoalescingTransport(real, asyncio.get_running_loop())  # type: ignore[arg-type]
        t.write(b"HTTP/1.1 200 OK\r\n\r\n")
        t.write(b"")
        t.write(b"{}")
        assert real.writes == [] and t.get_write_buffer_size() == 21
        await asyncio.sleep(0)
        t.write(b"next")
        await asyncio.sleep(0)
        assert t.get_extra_info("peername") == ("127.0.0.1", 5)
        return real

    assert asyncio.run(run()).writes == [b"HTTP/1.1 200 OK\r\n\r\n{}", b"next"]


def test_close_and_eof_write_what_is_pending_first_abort_drops_it() -> None:
    async def run() -> tuple[FakeTransport, FakeTransport, FakeTransport]:
        loop = asyncio.get_running_loop()
        a, b, c = FakeTransport(), FakeTransport(), FakeTransport()
        for real, end in ((a, "close"), (b, "write_eof"), (c, "abort")):
            t = WriteCoalescingTransport(real, loop)  # type: ignore[arg-type]
            t.write(b"bye")
            getattr(t, end)()
        await asyncio.sleep(0)  # the scheduled flush finds nothing (or a closed transport)
        return a, b, c

    a, b, c = asyncio.run(run())
    assert a.writes == [b"bye"] and a.closed
    assert b.writes == [b"bye"] and b.eof
    assert c.writes == [] and c.aborted
