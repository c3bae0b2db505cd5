"""An incremental parser of HTTP/1.1 responses, for the load generator of ``bench query``.

Just enough of RFC 9112 for a client that sends GET and POST requests to one server and
reads the answers on a keep-alive connection: the status line, the header fields, and a
body framed by ``Transfer-Encoding: chunked`` (chunk extensions and trailer fields are
skipped), by ``Content-Length``, or (without either) by the end of the connection.
1xx answers are skipped; 204 and 304 answers have no body. It does not check header
syntax beyond what the framing needs: the server under test is trusted to speak HTTP.
"""

from __future__ import annotations

from dataclasses import dataclass

MAX_HEAD_BYTES = 64 * 1024  # a longer status line + header block is refused
_HEAD_END = b"\r\n\r\n"
_CRLF = b"\r\n"


class ProtocolError(Exception):
    """The bytes received are not an HTTP/1.x response this parser can frame."""


@dataclass(frozen=True)
class Response:
    status: int
    body: bytes
    keep_alive: bool  # false: the server closes the connection after this answer
    headers: tuple[tuple[bytes, bytes], ...]  # names lower-cased, in the order received


class ResponseParser:
    """Feed it the bytes of a connection as they arrive; it returns whole responses.

    >>> parser = ResponseParser()
    >>> parser.feed(b"HTTP/1.1 200 OK\\r\\nContent-Length: 2\\r\\n\\r\\nh")
    []
    >>> [(r.status, r.body) for r in parser.feed(b"i")]
    [(200, b'hi')]
    """

    def __init__(self) -> None:
        self._buf = bytearray()
        self._pos = 0  # bytes of _buf already consumed
        self._head: tuple[int, tuple[tuple[bytes, bytes], ...], bool] | None = None
        self._mode = ""  # "length", "chunked" or "close" once a head is parsed
        self._remaining = 0  # "length": body bytes still missing
        self._chunks: list[bytes] = []
        self._chunk_left = -1  # "chunked": bytes of the current chunk missing; -1 = at a size line
        self._in_trailers = False

    def feed(self, data: bytes) -> list[Response]:
        """Add ``data``; return the responses completed by it (raises ProtocolError)."""
        self._buf += data
        done: list[Response] = []
        while (response := self._next()) is not None:
            done.append(response)
        if self._pos:
            del self._buf[: self._pos]
            self._pos = 0
        return done

    def close(self) -> Response | None:
        """The server closed the connection: completes a body framed by the close."""
        if self._head is not None and self._mode == "close":
            body = bytes(self._buf[self._pos :])
            self._buf.clear()
            self._pos = 0
            return self._finish(body)
        return None

    @property
    def idle(self) -> bool:
        """True between responses (nothing of a next one received yet)."""
        return self._head is None and self._pos == len(self._buf)

    def _next(self) -> Response | None:
        if self._head is None and not self._read_head():
            return None
        if self._mode == "length":
            if len(self._buf) - self._pos < self._remaining:
                return None
            end = self._pos + self._remaining
            body = bytes(self._buf[self._pos : end])
            self._pos = end
            return self._finish(body)
        if self._mode == "chunked":
            return self._read_chunks()
        return None  # "close": only close() completes it

    def _read_head(self) -> bool:
        end = self._buf.find(_HEAD_END, self._pos)
        if end < 0:
            if len(self._buf) - self._pos > MAX_HEAD_BYTES:
                raise ProtocolError(f"no end of the header block in {MAX_HEAD_BYTES} bytes")
            return False
        lines = bytes(self._buf[self._pos : end]).split(_CRLF)
        self._pos = end + len(_HEAD_END)
        version, _, rest = lines[0].partition(b" ")
        code = rest[:3]
        if not version.startswith(b"HTTP/1.") or len(code) != 3 or not code.isdigit():
            raise ProtocolError(f"not an HTTP/1.x status line: {lines[0][:80]!r}")
        status = int(code)
        headers = []
        for line in lines[1:]:
            name, sep, value = line.partition(b":")
            if not sep:
                raise ProtocolError(f"not a header field: {line[:80]!r}")
            headers.append((name.strip().lower(), value.strip()))
        if 100 <= status < 200:
            return self._read_head() if self._pos < len(self._buf) else False
        fields = dict(headers)
        connection = fields.get(b"connection", b"").lower()
        keep_alive = (
            b"close" not in connection if version == b"HTTP/1.1" else b"keep-alive" in connection
        )
        self._head = (status, tuple(headers), keep_alive)
        if status in (204, 304):
            self._mode, self._remaining = "length", 0
        elif b"chunked" in fields.get(b"transfer-encoding", b"").lower():
            self._mode, self._chunk_left, self._in_trailers = "chunked", -1, False
            self._chunks = []
        elif b"content-length" in fields:
            try:
                self._remaining = int(fields[b"content-length"])
            except ValueError:
                raise ProtocolError(
                    f"bad Content-Length {fields[b'content-length'][:40]!r}"
                ) from None
            if self._remaining < 0:
                raise ProtocolError(f"negative Content-Length {self._remaining}")
            self._mode = "length"
        else:
            self._mode = "close"
        return True

    def _read_chunks(self) -> Response | None:
        buf = self._buf
        while True:
            if self._in_trailers:
                # Trailer fields end with an empty line; none at all is the usual case.
                if buf.startswith(_CRLF, self._pos):
                    self._pos += len(_CRLF)
                    return self._finish(b"".join(self._chunks))
                end = buf.find(_HEAD_END, self._pos)
                if end < 0:
                    return None
                self._pos = end + len(_HEAD_END)
                return self._finish(b"".join(self._chunks))
            if self._chunk_left < 0:
                end = buf.find(_CRLF, self._pos)
                if end < 0:
                    if len(buf) - self._pos > MAX_HEAD_BYTES:
                        raise ProtocolError("a chunk size line without an end")
                    return None
                size_text = bytes(buf[self._pos : end]).partition(b";")[0].strip()
                try:
                    size = int(size_text, 16)
                except ValueError:
                    raise ProtocolError(f"bad chunk size {size_text[:40]!r}") from None
                self._pos = end + len(_CRLF)
                if size == 0:
                    self._in_trailers = True
                    continue
                self._chunk_left = size
            # The chunk's data and the CRLF after it.
            if len(buf) - self._pos < self._chunk_left + len(_CRLF):
                return None
            end = self._pos + self._chunk_left
            if buf[end : end + len(_CRLF)] != _CRLF:
                raise ProtocolError("a chunk is not followed by CRLF")
            self._chunks.append(bytes(buf[self._pos : end]))
            self._pos = end + len(_CRLF)
            self._chunk_left = -1

    def _finish(self, body: bytes) -> Response:
        assert self._head is not None
        status, headers, keep_alive = self._head
        keep_alive = keep_alive and self._mode != "close"
        self._head, self._mode, self._chunks = None, "", []
        return Response(status, body, keep_alive, headers)
