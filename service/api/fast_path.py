"""The busiest reads answered before FastAPI's routing, or handed on to it unchanged.

Related documents, similar-to-a-draft and distance are what other applications call in
volume. FastAPI's routing, dependency and parameter machinery costs about as much CPU
per request as the answer itself (0.3-0.5 ms on this machine), which with 32 waiting
connections on two cores is what the latency is made of. This ASGI middleware answers
such a request itself when everything about it is plainly in order:

- the path is one of the three, the method GET (POST for similar);
- every parameter is present in its simplest form and in range (k digits, t a plain
  decimal), each given once;
- the bearer key may read (KeyVerifier's cache, or one direct read when that expired);
- the collection's live index is current (no version to load, no document to place);
- the use case answers without raising.

Anything else (a malformed parameter, an unknown key, an error, a refresh due) is passed
on, untouched, to the FastAPI app, whose route computes the answer or the error the
usual way; a consumed request body is replayed to it. Both paths call the same use cases
(service.pipeline.queries) and encode with ``json_response``, so an answer does not
depend on the path that gave it (tests/api/test_fast_path.py compares them byte for
byte).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any
from urllib.parse import parse_qsl

from pydantic import ValidationError
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.api.body import decode_json
from service.api.live import json_response
from service.api.routes.queries import MAX_K, MAX_TARGETS, DraftIn
from service.errors import TidemapError
from service.pipeline import queries as use
from service.pipeline.collections import check_name
from service.pipeline.keys import scope_allows

__all__ = ["FastPathCounts", "QueryFastPath"]

_NEIGHBORS = re.compile(r"^/v1/collections/([^/]+)/documents/([^/]+)/neighbors$")
_DISTANCE = re.compile(r"^/v1/collections/([^/]+)/distance$")
_SIMILAR = re.compile(r"^/v1/collections/([^/]+)/similar$")
_DIGITS = re.compile(r"^[0-9]{1,4}$")
_DECIMAL = re.compile(r"^[0-9]{1,6}(\.[0-9]{1,12})?$")
MAX_FROM_CHARS = 256  # as the route's `from` parameter


class _HandOnError(Exception):
    """The request is not plainly in order: FastAPI's route answers it."""


@dataclass
class FastPathCounts:
    """Requests the fast path answered itself, and those it looked at and handed on."""

    answered: int = 0
    declined: int = 0


def _count(scope: Scope, what: str) -> None:
    counts: FastPathCounts = scope["app"].state.fast_path
    setattr(counts, what, getattr(counts, what) + 1)


class QueryFastPath:
    """ASGI middleware in front of the FastAPI app's routes (added by ``create_app``,
    which puts a `FastPathCounts` on ``app.state.fast_path``)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        method, path = scope["method"], scope["path"]
        try:
            if method == "GET" and path.endswith("/neighbors"):
                match = _NEIGHBORS.match(path)
                if match is not None:
                    body = self._neighbors(scope, match)
                    await _send(send, body)
                    return
            elif method == "GET" and path.endswith("/distance"):
                match = _DISTANCE.match(path)
                if match is not None:
                    body = self._distance(scope, match)
                    await _send(send, body)
                    return
            elif method == "POST" and path.endswith("/similar"):
                match = _SIMILAR.match(path)
                if match is not None:
                    receive = await self._similar(scope, receive, send, match)
                    if receive is None:
                        return
        except _HandOnError:
            _count(scope, "declined")
        await self.app(scope, receive, send)

    # --- the three reads ---------------------------------------------------------

    def _neighbors(self, scope: Scope, match: re.Match[str]) -> dict[str, Any]:
        params = _params(scope, allowed={"k", "t"})
        k = _k(params.get("k"))
        t = _t(params.get("t"))
        state, live = _live(scope, match.group(1))
        return self._answer(scope, lambda: use.neighbors(state.engine, live, match.group(2), k, t))

    def _distance(self, scope: Scope, match: re.Match[str]) -> dict[str, Any]:
        pairs = _pairs(scope)
        sources = [v for n, v in pairs if n == "from"]
        targets = [v for n, v in pairs if n == "to"]
        ts = [v for n, v in pairs if n == "t"]
        if len(sources) + len(targets) + len(ts) != len(pairs) or len(sources) != 1:
            raise _HandOnError
        if not 1 <= len(sources[0]) <= MAX_FROM_CHARS or not 1 <= len(targets) <= MAX_TARGETS:
            raise _HandOnError
        if len(ts) > 1:
            raise _HandOnError
        t = _t(ts[0] if ts else None)
        state, live = _live(scope, match.group(1))
        return self._answer(scope, lambda: use.distance(state.engine, live, sources[0], targets, t))

    async def _similar(
        self, scope: Scope, receive: Receive, send: Send, match: re.Match[str]
    ) -> Receive | None:
        """Answers and returns None, or returns the ``receive`` that replays the body."""
        state = scope["app"].state
        limits = state.settings
        if scope["query_string"]:
            raise _HandOnError
        _authorised(scope)
        chunks, complete = await _read_body(receive, limits.max_body_bytes)
        replay = _replaying(chunks, complete, receive)
        if complete is None:  # the client left
            return None
        try:
            if not complete:
                raise _HandOnError
            draft = DraftIn.model_validate(decode_json(b"".join(chunks)))
            if len(draft.text.encode("utf-8")) > limits.max_text_bytes:
                raise _HandOnError
            live = _current_live(scope, match.group(1))
            answer = self._answer(
                scope, lambda: use.similar(live, draft.text, draft.title, draft.k, draft.t)
            )
        except (_HandOnError, TidemapError, ValidationError):
            _count(scope, "declined")
            return replay
        await _send(send, answer)
        return None

    def _answer(self, scope: Scope, compute: Any) -> dict[str, Any]:
        try:
            answer: dict[str, Any] = compute()
        except TidemapError as exc:  # the route raises it again and answers the error
            raise _HandOnError from exc
        _count(scope, "answered")
        return answer


# --- what is checked before answering ------------------------------------------------


def _pairs(scope: Scope) -> list[tuple[str, str]]:
    """The query string's (name, value) pairs; percent-escapes that are not UTF-8, or raw
    bytes beyond ASCII, are the app's to judge."""
    try:
        text = scope["query_string"].decode("ascii")
        return parse_qsl(text, keep_blank_values=True, errors="strict")
    except (UnicodeDecodeError, ValueError) as exc:
        raise _HandOnError from exc


def _params(scope: Scope, allowed: set[str]) -> dict[str, str]:
    pairs = _pairs(scope)
    params = dict(pairs)
    if len(params) != len(pairs) or not params.keys() <= allowed:
        raise _HandOnError
    return params


def _k(raw: str | None) -> int:
    if raw is None:
        return 10
    if not _DIGITS.match(raw) or not 1 <= int(raw) <= MAX_K:
        raise _HandOnError
    return int(raw)


def _t(raw: str | None) -> float | None:
    if raw is None:
        return None
    if not _DECIMAL.match(raw):
        raise _HandOnError
    value = float(raw)
    if not (math.isfinite(value) and 0 < value <= use.MAX_T):
        raise _HandOnError
    return value


def _authorised(scope: Scope) -> None:
    token = None
    for name, value in scope["headers"]:
        if name == b"authorization":
            if token is not None:
                raise _HandOnError
            scheme, _, rest = value.decode("latin-1").partition(" ")
            if scheme.lower() != "bearer" or not rest.strip():
                raise _HandOnError
            token = rest.strip()
    if token is None:
        raise _HandOnError
    try:
        granted = scope["app"].state.key_verifier.scope_now(token)
    except Exception as exc:  # a driver error: the route's look-up reports it properly
        raise _HandOnError from exc
    if granted is None or not scope_allows(granted, "read"):
        raise _HandOnError


def _current_live(scope: Scope, raw_collection: str) -> Any:
    try:
        live = scope["app"].state.live_index.peek(check_name(raw_collection))
    except Exception as exc:  # incl. raw driver errors: the route answers them properly
        raise _HandOnError from exc
    if live is None:  # a refresh is due: the route does it in a thread
        raise _HandOnError
    return live


def _live(scope: Scope, raw_collection: str) -> tuple[Any, Any]:
    _authorised(scope)
    return scope["app"].state, _current_live(scope, raw_collection)


# --- bodies ----------------------------------------------------------------------------


async def _read_body(receive: Receive, limit: int) -> tuple[list[bytes], bool | None]:
    """(chunks read, True when that is the whole body, False when it passed ``limit``,
    None when the client disconnected)."""
    chunks: list[bytes] = []
    size = 0
    while True:
        message = await receive()
        if message["type"] != "http.request":
            return chunks, None
        chunk = message.get("body", b"")
        size += len(chunk)
        chunks.append(chunk)
        if not message.get("more_body", False):
            return chunks, True
        if size > limit:
            return chunks, False


def _replaying(chunks: list[bytes], complete: bool | None, receive: Receive) -> Receive:
    """A ``receive`` that gives the chunks already read, then goes on with the original
    (the rest of the body, then a disconnect when it comes)."""
    pending = list(chunks)

    async def replay() -> Message:
        if pending:
            chunk = pending.pop(0)
            more = bool(pending) or not complete
            return {"type": "http.request", "body": chunk, "more_body": more}
        return await receive()

    return replay


async def _send(send: Send, body: dict[str, Any]) -> None:
    response = json_response(body)
    headers = [(b"content-length", str(len(response.body)).encode("latin-1"))]
    headers.append((b"content-type", b"application/json"))
    await send({"type": "http.response.start", "status": 200, "headers": headers})
    await send({"type": "http.response.body", "body": response.body})
