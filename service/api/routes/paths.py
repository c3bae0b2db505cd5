"""The most probable chain of documents linking two documents."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Query, Request

from service.api.deps import READ
from service.pipeline import path_query as use
from service.pipeline.collections import check_name
from service.pipeline.live_index import LiveIndex

router = APIRouter(prefix="/v1/collections/{collection}", tags=["queries"])

DocumentId = Annotated[str, Query(min_length=1, max_length=256)]


@router.get("/path", dependencies=[READ], summary="Chain of documents linking two")
def get_path(
    collection: str,
    request: Request,
    source: Annotated[str, Query(alias="from", min_length=1, max_length=256)],
    to: DocumentId,
) -> Any:
    """The most probable walk of the map's random walk from ``from`` to ``to``: the
    documents it passes, each step's transition probability and the five terms the two
    documents of each step share most (largest product of TF-IDF weights); the path's
    probability is the product of its steps'. Documents deleted or changed since the
    build are never stepped on; provisional documents join by one step to their kernel
    neighbours. Documents in different components: ``found`` false with a ``reason``."""
    index: LiveIndex = request.app.state.live_index
    live = index.get(check_name(collection))
    return use.path(request.app.state.engine, live, source, to)
