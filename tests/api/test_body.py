"""Reading bodies: size limits, UTF-8, strict JSON, and NDJSON lines however the bytes
arrive (a real server hands the body over in chunks of any size; TestClient in one)."""

from __future__ import annotations

import asyncio
import json
from typing import Any

import pytest
from starlette.requests import Request

from service.api.body import decode_json, ndjson_lines, read_body
from service.errors import MalformedRequestError, PayloadTooLargeError


def request(chunks: list[bytes], headers: dict[str, str] | None = None) -> Request:
    messages = [{"type": "http.request", "body": c, "more_body": True} for c in chunks]
    messages.append({"type": "http.request", "body": b"", "more_body": False})

    async def receive() -> dict[str, Any]:
        return messages.pop(0)

    raw_headers = [(k.encode(), v.encode()) for k, v in (headers or {}).items()]
    return Request({"type": "http", "method": "POST", "headers": raw_headers}, receive)


def lines_of(chunks: list[bytes], line_limit: int) -> list[tuple[int, Any]]:
    async def collect() -> list[tuple[int, Any]]:
        return [item async for item in ndjson_lines(request(chunks), line_limit)]

    out = asyncio.run(collect())
    # Errors compared by class and code (instances never compare equal).
    return [(n, (type(v).__name__, v.code) if isinstance(v, Exception) else v) for n, v in out]


def split(data: bytes, size: int) -> list[bytes]:
    return [data[i : i + size] for i in range(0, len(data), size)]


BODY = b'{"a": 1}\n\n[2]\n{"b": \n' + b'{"c": "' + b"x" * 60 + b'"}\n' + b'{"d": 4}\r\n"tail"'


def test_ndjson_lines_do_not_depend_on_chunking() -> None:
    expected = lines_of([BODY], line_limit=50)
    assert expected == [
        (1, {"a": 1}),
        (3, [2]),
        (4, ("MalformedRequestError", "malformed_json")),
        (5, ("PayloadTooLargeError", "payload_too_large")),
        (6, {"d": 4}),
        (7, "tail"),
    ]
    for size in range(1, len(BODY) + 1):
        assert lines_of(split(BODY, size), line_limit=50) == expected, size


def test_overlong_last_line_without_newline() -> None:
    body = b'{"a": 1}\n' + b"y" * 100
    expected = [(1, {"a": 1}), (2, ("PayloadTooLargeError", "payload_too_large"))]
    assert lines_of([body], line_limit=50) == expected
    assert lines_of(split(body, 7), line_limit=50) == expected


def test_ndjson_line_not_utf8_is_reported_and_the_stream_goes_on() -> None:
    body = b'{"a": "\xff"}\n{"b": 2}\n'
    assert lines_of(split(body, 3), line_limit=50) == [
        (1, ("MalformedRequestError", "bad_encoding")),
        (2, {"b": 2}),
    ]


def test_read_body_refuses_a_declared_size_over_the_limit() -> None:
    with pytest.raises(PayloadTooLargeError):
        asyncio.run(read_body(request([b"x"], {"content-length": "5000"}), limit=1024))


def test_read_body_refuses_a_streamed_body_over_the_limit() -> None:
    with pytest.raises(PayloadTooLargeError):
        asyncio.run(read_body(request([b"x" * 600, b"x" * 600]), limit=1024))
    assert asyncio.run(read_body(request([b"x" * 600, b"x" * 424]), limit=1024)) == b"x" * 1024


@pytest.mark.parametrize(
    ("data", "code"),
    [
        (b"", "empty_body"),
        (b"  \n", "empty_body"),
        (b"\xff\xfe{}", "bad_encoding"),
        (b"{", "malformed_json"),
        (b"\xef\xbb\xbf{}", "malformed_json"),  # a byte-order mark is not JSON
        (b"NaN", "malformed_json"),
        (b'{"x": Infinity}', "malformed_json"),
        (b"[-Infinity]", "malformed_json"),
        (b"1e400", "malformed_json"),
        (b"-1e400", "malformed_json"),
        (b"1" * 5000, "malformed_json"),  # beyond Python's integer-string limit
        (b"[" * 100_000 + b"]" * 100_000, "malformed_json"),
        (b'"\\ud800"', "bad_encoding"),
        (b'{"\\udc00": 1}', "bad_encoding"),
        (b'["a\\ud83d"]', "bad_encoding"),
    ],
)
def test_decode_json_refuses(data: bytes, code: str) -> None:
    with pytest.raises(MalformedRequestError) as caught:
        decode_json(data)
    assert caught.value.code == code


@pytest.mark.parametrize(
    "data",
    [
        b'"\\ud83d\\ude00"',  # a surrogate pair is one character
        b'"\\\\ud800"',  # an escaped backslash, then letters
        b"1e300",
        b"12345678901234567890123456789",
        '{"text": "Ωμέγα 東京 \\u00e9"}'.encode(),
    ],
)
def test_decode_json_accepts(data: bytes) -> None:
    assert decode_json(data) == json.loads(data)
