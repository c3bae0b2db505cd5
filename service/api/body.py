"""Reading request bodies ourselves, so size limits, encoding and JSON errors are exact."""

from __future__ import annotations

import json
import math
import re
from collections.abc import AsyncIterator
from typing import Any

from fastapi import Request

from service.errors import MalformedRequestError, PayloadTooLargeError


async def read_body(request: Request, limit: int) -> bytes:
    declared = request.headers.get("content-length")
    if declared is not None and declared.isdigit() and int(declared) > limit:
        raise PayloadTooLargeError(
            f"the body is {declared} bytes; the limit is {limit}", {"limit": limit}
        )
    chunks: list[bytes] = []
    size = 0
    async for chunk in request.stream():
        size += len(chunk)
        if size > limit:
            raise PayloadTooLargeError(f"the body exceeds {limit} bytes", {"limit": limit})
        chunks.append(chunk)
    return b"".join(chunks)


# A \uD800-\uDFFF escape: JSON can spell a lone surrogate, which has no UTF-8 form.
_SURROGATE_ESCAPE = re.compile(r"\\u[dD][89a-fA-F]")


def _finite(literal: str) -> float:
    value = float(literal)
    if not math.isfinite(value):
        raise ValueError(f"the number {literal[:40]} is too large")
    return value


def _no_constant(name: str) -> Any:
    raise ValueError(f"{name} is not valid JSON")


def decode_json(data: bytes, *, what: str = "the body") -> Any:
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise MalformedRequestError(
            f"{what} is not UTF-8 (invalid byte at position {exc.start})",
            {"position": exc.start},
            code="bad_encoding",
        ) from exc
    if not text.strip():
        raise MalformedRequestError(f"{what} is empty; send a JSON value", code="empty_body")
    try:
        # NaN, Infinity and numbers beyond float range are not JSON (Python accepts them).
        value = json.loads(text, parse_constant=_no_constant, parse_float=_finite)
    except json.JSONDecodeError as exc:
        raise MalformedRequestError(
            f"{what} is not valid JSON: {exc.msg} at line {exc.lineno} column {exc.colno}",
            {"line": exc.lineno, "column": exc.colno},
            code="malformed_json",
        ) from exc
    except ValueError as exc:  # a non-finite number, or an integer of over 4,300 digits
        raise MalformedRequestError(
            f"{what} is not acceptable JSON: {str(exc)[:200]}", code="malformed_json"
        ) from exc
    except RecursionError as exc:
        raise MalformedRequestError(f"{what} is nested too deeply", code="malformed_json") from exc
    if _SURROGATE_ESCAPE.search(text):
        try:
            json.dumps(value, ensure_ascii=False).encode("utf-8")
        except UnicodeEncodeError as exc:
            raise MalformedRequestError(
                f"{what} holds a lone UTF-16 surrogate escape, which is no character",
                code="bad_encoding",
            ) from exc
    return value


async def read_json(request: Request, limit: int) -> Any:
    return decode_json(await read_body(request, limit))


async def ndjson_lines(request: Request, line_limit: int) -> AsyncIterator[tuple[int, Any]]:
    """Yield (line number from 1, parsed object or the MalformedRequestError) per line.

    Blank lines are skipped; a line over ``line_limit`` bytes yields a PayloadTooLargeError
    for that line and the stream goes on.
    """
    buffer = b""
    number = 0
    overflow = False

    def parse(line: bytes, n: int) -> tuple[int, Any]:
        try:
            return n, decode_json(line, what=f"line {n}")
        except MalformedRequestError as exc:
            return n, exc

    async for chunk in request.stream():
        buffer += chunk
        while True:
            cut = buffer.find(b"\n")
            if cut < 0:
                break
            line, buffer = buffer[:cut], buffer[cut + 1 :]
            number += 1
            if overflow or len(line) > line_limit:  # the same whatever the chunking
                overflow = False
                yield number, PayloadTooLargeError(f"line {number} exceeds {line_limit} bytes")
            elif line.strip():
                yield parse(line, number)
        if len(buffer) > line_limit:
            overflow, buffer = True, b""
    if overflow:
        number += 1
        yield number, PayloadTooLargeError(f"line {number} exceeds {line_limit} bytes")
    elif buffer.strip():
        yield parse(buffer, number + 1)
