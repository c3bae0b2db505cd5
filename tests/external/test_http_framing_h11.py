"""The benchmark's hand-made HTTP/1.1 framing checked against h11 (the reference
implementation uvicorn's default protocol uses): h11 parses the requests the query
benchmark builds, and the load generator's parser reads responses h11 writes."""

from __future__ import annotations

import json

import h11
import pytest

from service.bench.http_parser import ResponseParser
from service.bench.query import request_bytes


def _server_events(raw: bytes) -> list[object]:
    conn = h11.Connection(h11.SERVER)
    conn.receive_data(raw)
    events = []
    while True:
        event = conn.next_event()
        if event is h11.NEED_DATA or isinstance(event, h11.EndOfMessage):
            events.append(event)
            return events
        events.append(event)


@pytest.mark.parametrize(
    ("method", "target", "body"),
    [
        ("GET", "/v1/collections/bench-query/documents/b0000012/neighbors?k=10", None),
        ("POST", "/v1/collections/bench-query/similar", {"text": "ferry tide harbour é", "k": 10}),
    ],
)
def test_h11_reads_the_requests_the_bench_builds(method: str, target: str, body: object) -> None:
    raw = request_bytes(method, target, body, host="127.0.0.1:8123", key="tdm_secret")  # type: ignore[arg-type]
    events = _server_events(raw)
    request = events[0]
    assert isinstance(request, h11.Request)
    assert request.method.decode() == method and request.target.decode() == target
    headers = dict(request.headers)
    assert headers[b"host"] == b"127.0.0.1:8123"
    assert headers[b"authorization"] == b"Bearer tdm_secret"
    data = b"".join(e.data for e in events if isinstance(e, h11.Data))
    assert (json.loads(data) if data else None) == body
    assert isinstance(events[-1], h11.EndOfMessage)


def _h11_response(headers: list[tuple[str, str]], pieces: list[bytes], status: int = 200) -> bytes:
    conn = h11.Connection(h11.SERVER)
    conn.receive_data(b"GET / HTTP/1.1\r\nHost: x\r\n\r\n")
    conn.next_event()
    conn.next_event()
    out = conn.send(h11.Response(status_code=status, headers=headers)) or b""
    for piece in pieces:
        out += conn.send(h11.Data(data=piece)) or b""
    return out + (conn.send(h11.EndOfMessage()) or b"")


def test_parser_reads_h11_chunked_and_length_framed_responses() -> None:
    pieces = [b'{"items": [', b'{"id": "b1"}', b"]}"]
    chunked = _h11_response([("Content-Type", "application/json")], pieces)
    assert b"transfer-encoding: chunked" in chunked.lower()  # h11 chose chunks: no length given
    body = b"".join(pieces)
    length = _h11_response([("Content-Length", str(len(body)))], [body], status=404)
    closing = _h11_response([("Content-Length", "2"), ("Connection", "close")], [b"ok"])
    responses = ResponseParser().feed(chunked + length + closing)
    assert [(r.status, r.body, r.keep_alive) for r in responses] == [
        (200, body, True),
        (404, body, True),
        (200, b"ok", False),
    ]
