"""One send per response: the writes an HTTP protocol makes in one turn of the event
loop go out together.

uvicorn writes a response's status line and headers when the app sends
``http.response.start`` and the body when it sends ``http.response.body``: two
``write`` calls, and on an idle socket two ``send`` system calls and two TCP segments,
which wake the client twice. For the small JSON answers that make up most of the
traffic, the kernel's share of that is as large as the Python one (`strace -c` on a
worker under `tidemap bench query`: two writes per request). `CoalescingTransport`
holds small writes until the loop's current turn ends, then sends them as one; a write
that brings the held bytes to `FLUSH_BYTES` goes out at once, so a streamed export
still meets the transport's flow control and never piles up here.
"""

from __future__ import annotations

import asyncio
import functools
from typing import Any

__all__ = ["FLUSH_BYTES", "CoalescingTransport", "coalescing_protocol", "http_protocol"]

FLUSH_BYTES = 64 * 1024


class CoalescingTransport:
    """A transport that gathers the small writes of one loop turn into one write of the
    transport it wraps; everything else is the wrapped transport's."""

    def __init__(self, transport: asyncio.Transport, loop: asyncio.AbstractEventLoop) -> None:
        self._transport = transport
        self._loop = loop
        self._held: list[bytes] = []
        self._held_bytes = 0

    def write(self, data: bytes | bytearray | memoryview) -> None:
        if not data:
            return
        if not self._held:
            self._loop.call_soon(self.flush)
        self._held.append(bytes(data))
        self._held_bytes += len(data)
        if self._held_bytes >= FLUSH_BYTES:
            self.flush()

    def writelines(self, chunks: Any) -> None:
        for chunk in chunks:
            self.write(chunk)

    def flush(self) -> None:
        """Send what is held (nothing once the connection is closing)."""
        if not self._held:
            return
        data = self._held[0] if len(self._held) == 1 else b"".join(self._held)
        self._held = []
        self._held_bytes = 0
        if not self._transport.is_closing():
            self._transport.write(data)

    def get_write_buffer_size(self) -> int:
        return self._transport.get_write_buffer_size() + self._held_bytes

    def close(self) -> None:
        self.flush()
        self._transport.close()

    def write_eof(self) -> None:
        self.flush()
        self._transport.write_eof()

    def abort(self) -> None:
        self._held = []
        self._held_bytes = 0
        self._transport.abort()

    def __getattr__(self, name: str) -> Any:
        return getattr(self._transport, name)


@functools.cache
def coalescing_protocol(base: type[asyncio.Protocol]) -> type[asyncio.Protocol]:
    """A subclass of the HTTP protocol class ``base`` (uvicorn's httptools or h11 one)
    whose connections write through a `CoalescingTransport`."""

    class Coalescing(base):  # type: ignore[valid-type, misc]
        def connection_made(self, transport: asyncio.BaseTransport) -> None:
            loop = asyncio.get_running_loop()
            super().connection_made(CoalescingTransport(transport, loop))  # type: ignore[arg-type]

    Coalescing.__name__ = Coalescing.__qualname__ = f"Coalescing{base.__name__}"
    return Coalescing


def http_protocol(name: str = "auto") -> type[asyncio.Protocol]:
    """The coalescing form of uvicorn's ``--http`` choice (auto, h11, httptools, or an
    import string of a protocol class)."""
    from uvicorn.config import HTTP_PROTOCOLS
    from uvicorn.importer import import_from_string

    return coalescing_protocol(import_from_string(HTTP_PROTOCOLS.get(name, name)))


# ``uvicorn --http service.api.coalescing_writes:httptools`` (and h11, auto): uvicorn
# imports a protocol class by name; these are made when first asked for.
def __getattr__(name: str) -> type[asyncio.Protocol]:
    if name in ("auto", "h11", "httptools"):
        return http_protocol(name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
