"""One send per response: CoalescingTransport on its own, inside uvicorn's HTTP
protocols (a recording transport counts the writes that reach the socket), and a real
server answering small, streamed and closing responses through it."""

from __future__ import annotations

import asyncio
import socket
import threading
import time
from collections.abc import Iterator
from typing import Any

import pytest
import uvicorn
from uvicorn.importer import ImportFromStringError, import_from_string
from uvicorn.server import ServerState

from service.api.coalescing_writes import FLUSH_BYTES, CoalescingTransport, http_protocol


class RecordingTransport(asyncio.Transport):
    """What reaches the socket: each write, and whether and when it was closed."""

    def __init__(self) -> None:
        super().__init__()
        self.writes: list[bytes] = []
        self.closed = False
        self.aborted = False
        self.reading = True

    def write(self, data: Any) -> None:
        assert not self.closed, "written after close"
        self.writes.append(bytes(data))

    def close(self) -> None:
        self.closed = True

    def abort(self) -> None:
        self.aborted = self.closed = True

    def is_closing(self) -> bool:
        return self.closed

    def get_write_buffer_size(self) -> int:
        return 7

    def get_extra_info(self, name: str, default: Any = None) -> Any:
        return {"peername": ("127.0.0.1", 5555), "sockname": ("127.0.0.1", 80)}.get(name, default)

    def pause_reading(self) -> None:
        self.reading = False

    def resume_reading(self) -> None:
        self.reading = True

    def set_protocol(self, protocol: asyncio.BaseProtocol) -> None:
        pass


async def _turns(n: int = 3) -> None:
    for _ in range(n):
        await asyncio.sleep(0)


def test_writes_of_one_turn_go_out_as_one() -> None:
    async def run() -> RecordingTransport:
        raw = RecordingTransport()
        tr = CoalescingTransport(raw, asyncio.get_running_loop())
        tr.write(b"HTTP/1.1 200 OK\r\n\r\n")
        tr.write(memoryview(b"{}"))
        tr.write(b"")
        assert raw.writes == []  # held until the turn ends
        assert tr.get_write_buffer_size() == 7 + 21
        await _turns()
        assert raw.writes == [b"HTTP/1.1 200 OK\r\n\r\n{}"]
        tr.writelines([b"a", b"b"])
        await _turns()
        return raw

    raw = asyncio.run(run())
    assert raw.writes[1:] == [b"ab"]


def test_a_large_write_goes_out_at_once_after_what_was_held() -> None:
    async def run() -> None:
        raw = RecordingTransport()
        tr = CoalescingTransport(raw, asyncio.get_running_loop())
        tr.write(b"head")
        big = b"x" * FLUSH_BYTES
        tr.write(big)
        assert raw.writes == [b"head" + big]  # in order, without waiting for the turn
        assert tr.get_write_buffer_size() == 7
        await _turns()
        assert raw.writes == [b"head" + big]  # the scheduled flush finds nothing

    asyncio.run(run())


def test_close_sends_what_is_held_first_and_abort_drops_it() -> None:
    async def run() -> tuple[RecordingTransport, RecordingTransport]:
        loop = asyncio.get_running_loop()
        raw, other = RecordingTransport(), RecordingTransport()
        tr = CoalescingTransport(raw, loop)
        tr.write(b"last words")
        tr.close()
        assert raw.writes == [b"last words"] and raw.closed
        tr.write(b"too late")
        await _turns()
        aborting = CoalescingTransport(other, loop)
        aborting.write(b"dropped")
        aborting.abort()
        await _turns()
        return raw, other

    raw, other = asyncio.run(run())
    assert raw.writes == [b"last words"]  # nothing written after close
    assert other.writes == [] and other.aborted


def test_other_calls_reach_the_wrapped_transport() -> None:
    async def run() -> None:
        raw = RecordingTransport()
        tr = CoalescingTransport(raw, asyncio.get_running_loop())
        assert tr.get_extra_info("peername") == ("127.0.0.1", 5555)
        tr.pause_reading()
        assert raw.reading is False
        assert tr.is_closing() is False

    asyncio.run(run())


async def _hello(scope: dict[str, Any], receive: Any, send: Any) -> None:
    assert scope["type"] == "http"
    body = b'{"hello":"world"}'
    headers = [(b"content-type", b"application/json"), (b"content-length", b"17")]
    await send({"type": "http.response.start", "status": 200, "headers": headers})
    await send({"type": "http.response.body", "body": body})


@pytest.mark.parametrize("name", ["h11", "httptools"])
def test_uvicorn_protocols_send_a_small_response_in_one_write(name: str) -> None:
    pytest.importorskip(name)
    config = uvicorn.Config(_hello, http=http_protocol(name), lifespan="off", log_level="error")
    config.load()
    requests = b"GET /a HTTP/1.1\r\nHost: x\r\n\r\n"

    async def run() -> RecordingTransport:
        loop = asyncio.get_running_loop()
        raw = RecordingTransport()
        protocol = config.http_protocol_class(  # type: ignore[call-arg]
            config=config, server_state=ServerState(), app_state={}, _loop=loop
        )
        protocol.connection_made(raw)
        protocol.data_received(requests)
        await _turns(20)
        protocol.data_received(requests)
        await _turns(20)
        return raw

    raw = asyncio.run(run())
    assert len(raw.writes) == 2  # one per response: status, headers and body together
    for write in raw.writes:
        assert write.startswith(b"HTTP/1.1 200 OK\r\n")
        assert write.endswith(b'\r\n\r\n{"hello":"world"}')


def test_the_named_protocols_resolve_to_coalescing_subclasses() -> None:
    pytest.importorskip("httptools")
    from uvicorn.protocols.http.httptools_impl import HttpToolsProtocol

    cls = import_from_string("service.api.coalescing_writes:httptools")
    assert issubclass(cls, HttpToolsProtocol) and cls is http_protocol("httptools")
    with pytest.raises(ImportFromStringError, match="nonesuch"):
        import_from_string("service.api.coalescing_writes:nonesuch")


STREAM_CHUNKS, STREAM_CHUNK = 40, b"0123456789abcdef" * 1024  # 640 KiB in all


async def _app(scope: dict[str, Any], receive: Any, send: Any) -> None:
    if scope["type"] != "http":
        return
    if scope["path"] == "/stream":
        headers = [(b"content-type", b"text/plain")]
        await send({"type": "http.response.start", "status": 200, "headers": headers})
        for _ in range(STREAM_CHUNKS):  # never yields to the loop between chunks
            await send({"type": "http.response.body", "body": STREAM_CHUNK, "more_body": True})
        await send({"type": "http.response.body", "body": b""})
        return
    await _hello(scope, receive, send)


@pytest.fixture(scope="module")
def server_port() -> Iterator[int]:
    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    config = uvicorn.Config(
        _app, http=http_protocol("auto"), loop="asyncio", lifespan="off", log_level="error"
    )
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    deadline = time.monotonic() + 10
    while not server.started:
        assert time.monotonic() < deadline, "server did not start"
        time.sleep(0.01)
    yield port
    server.should_exit = True
    thread.join(10)
    sock.close()


def _read_until_closed(conn: socket.socket) -> bytes:
    out = b""
    while chunk := conn.recv(65536):
        out += chunk
    return out


def _read_response(conn: socket.socket) -> tuple[bytes, bytes]:
    data = b""
    while b"\r\n\r\n" not in data:
        data += conn.recv(65536)
    head, _, body = data.partition(b"\r\n\r\n")
    if b"transfer-encoding: chunked" in head.lower():
        while not body.endswith(b"0\r\n\r\n"):
            body += conn.recv(65536)
        return head, _dechunk(body)
    length = int(next(v for k, v in _headers(head) if k == b"content-length"))
    while len(body) < length:
        body += conn.recv(65536)
    return head, body


def _headers(head: bytes) -> list[tuple[bytes, bytes]]:
    lines = head.split(b"\r\n")[1:]
    return [(k.strip().lower(), v.strip()) for k, _, v in (line.partition(b":") for line in lines)]


def _dechunk(body: bytes) -> bytes:
    out = b""
    while True:
        size_line, _, body = body.partition(b"\r\n")
        size = int(size_line, 16)
        if size == 0:
            return out
        out, body = out + body[:size], body[size + 2 :]


def test_a_real_server_answers_keep_alive_streamed_and_closing_requests(server_port: int) -> None:
    with socket.create_connection(("127.0.0.1", server_port), timeout=10) as conn:
        for _ in range(3):  # keep-alive: each answer whole, in order
            conn.sendall(b"GET /a HTTP/1.1\r\nHost: x\r\n\r\n")
            head, body = _read_response(conn)
            assert head.startswith(b"HTTP/1.1 200") and body == b'{"hello":"world"}'
        conn.sendall(b"GET /stream HTTP/1.1\r\nHost: x\r\n\r\n")
        head, body = _read_response(conn)
        assert body == STREAM_CHUNK * STREAM_CHUNKS
        # A closing request: the held answer is sent before the connection closes.
        conn.sendall(b"GET /a HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n")
        rest = _read_until_closed(conn)
    assert rest.startswith(b"HTTP/1.1 200") and rest.endswith(b'{"hello":"world"}')
