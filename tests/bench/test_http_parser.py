"""The load generator's response parser: framing by length, chunks and close."""

from __future__ import annotations

import pytest

from service.bench.http_parser import ProtocolError, Response, ResponseParser


def _byte_by_byte(data: bytes) -> list[Response]:
    parser = ResponseParser()
    out: list[Response] = []
    for i in range(len(data)):
        out += parser.feed(data[i : i + 1])
    assert parser.idle
    return out


LENGTH = (
    b'HTTP/1.1 200 OK\r\nContent-Type: application/json\r\nContent-Length: 11\r\n\r\n{"a": [12]}'
)
CHUNKED = (
    b"HTTP/1.1 201 Created\r\nTransfer-Encoding: chunked\r\n\r\n"
    b"5\r\nhello\r\n"
    b"1;name=value\r\n \r\n"  # a chunk extension, skipped
    b"A\r\n0123456789\r\n"
    b"0\r\nX-Checksum: 1\r\n\r\n"  # a trailer field, skipped
)


@pytest.mark.parametrize(
    ("raw", "status", "body"),
    [(LENGTH, 200, b'{"a": [12]}'), (CHUNKED, 201, b"hello 0123456789")],
)
def test_one_response_whatever_the_split(raw: bytes, status: int, body: bytes) -> None:
    whole = ResponseParser().feed(raw)
    assert [(r.status, r.body, r.keep_alive) for r in whole] == [(status, body, True)]
    assert _byte_by_byte(raw) == whole
    for cut in range(1, len(raw)):
        parser = ResponseParser()
        assert parser.feed(raw[:cut]) == []
        assert parser.feed(raw[cut:]) == whole


def test_responses_back_to_back_in_one_read() -> None:
    no_content = b"HTTP/1.1 204 No Content\r\n\r\n"
    continue_first = b"HTTP/1.1 100 Continue\r\n\r\n" + LENGTH
    responses = ResponseParser().feed(LENGTH + CHUNKED + no_content + continue_first)
    assert [(r.status, len(r.body)) for r in responses] == [
        (200, 11),
        (201, 16),
        (204, 0),
        (200, 11),
    ]


def test_header_names_are_lower_cased_and_kept_in_order() -> None:
    (response,) = ResponseParser().feed(LENGTH)
    assert response.headers == ((b"content-type", b"application/json"), (b"content-length", b"11"))


@pytest.mark.parametrize(
    ("head", "keep_alive"),
    [
        (b"HTTP/1.1 200 OK\r\nConnection: close\r\n", False),
        (b"HTTP/1.1 200 OK\r\nConnection: Keep-Alive\r\n", True),
        (b"HTTP/1.0 200 OK\r\n", False),
        (b"HTTP/1.0 200 OK\r\nConnection: keep-alive\r\n", True),
    ],
)
def test_keep_alive_follows_version_and_connection_field(head: bytes, keep_alive: bool) -> None:
    (response,) = ResponseParser().feed(head + b"Content-Length: 0\r\n\r\n")
    assert response.keep_alive is keep_alive


def test_a_body_without_length_ends_with_the_connection() -> None:
    parser = ResponseParser()
    assert parser.feed(b"HTTP/1.1 500 Oops\r\n\r\npart one, ") == []
    assert parser.feed(b"part two") == []
    response = parser.close()
    assert response is not None
    assert (response.status, response.body, response.keep_alive) == (
        500,
        b"part one, part two",
        False,
    )


def test_close_between_responses_completes_nothing() -> None:
    parser = ResponseParser()
    parser.feed(LENGTH)
    assert parser.close() is None


@pytest.mark.parametrize(
    "raw",
    [
        b"SMTP 220 hello\r\n\r\n",
        b"HTTP/1.1 OK\r\n\r\n",
        b"HTTP/1.1 200 OK\r\nno colon here\r\n\r\n",
        b"HTTP/1.1 200 OK\r\nContent-Length: ten\r\n\r\n",
        b"HTTP/1.1 200 OK\r\nContent-Length: -1\r\n\r\n",
        b"HTTP/1.1 200 OK\r\nTransfer-Encoding: chunked\r\n\r\nzz\r\n",
        b"HTTP/1.1 200 OK\r\nTransfer-Encoding: chunked\r\n\r\n3\r\nabcX\r\n",
    ],
)
def test_malformed_responses_are_refused(raw: bytes) -> None:
    with pytest.raises(ProtocolError):
        ResponseParser().feed(raw)


def test_an_endless_header_block_is_refused() -> None:
    parser = ResponseParser()
    parser.feed(b"HTTP/1.1 200 OK\r\n")
    with pytest.raises(ProtocolError, match="header block"):
        parser.feed(b"X-Filler: " + b"a" * 70_000)
