"""What the query routes share: the live index without a thread hop when it is current,
and JSON written straight to bytes.

Query routes are ``async``: their work is a few hundred microseconds of numpy, so a hop
to the thread pool (and FastAPI's generic encoding of the answer) would cost more than the
answer itself. Anything that may take long, a version to load or documents to place,
still goes to a thread, so the event loop never waits for it.
"""

from __future__ import annotations

import json
from typing import Any

from fastapi import Request, Response
from fastapi.concurrency import run_in_threadpool

from service.pipeline.collections import check_name
from service.pipeline.live_index import Live, LiveIndex

__all__ = ["JSON_TYPE", "json_response", "live_of"]

JSON_TYPE = "application/json"


async def live_of(request: Request, collection: str) -> Live:
    """The collection's live index (NotFoundError; ConflictError before any build)."""
    index: LiveIndex = request.app.state.live_index
    name = check_name(collection)
    live = index.peek(name)
    if live is None:
        live = await run_in_threadpool(index.get, name)
    return live


def json_response(body: dict[str, Any], status_code: int = 200) -> Response:
    """``body`` (plain dicts, lists, str, int, finite float, bool, None) as JSON, encoded
    as FastAPI's JSONResponse does (UTF-8, no NaN), minus its generic conversion."""
    data = json.dumps(body, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    return Response(data.encode("utf-8"), status_code=status_code, media_type=JSON_TYPE)
