"""The whole map of a collection, streamed: GET /v1/collections/{c}/map."""

from __future__ import annotations

from typing import Annotated, Literal

from fastapi import APIRouter, Query, Request
from fastapi.responses import StreamingResponse

from service.api.deps import READ
from service.pipeline import map_export as use
from service.pipeline.collections import check_name
from service.pipeline.live_index import LiveIndex
from service.pipeline.queries import MAX_T

router = APIRouter(prefix="/v1/collections/{collection}", tags=["queries"])


@router.get("/map", dependencies=[READ], summary="Every document's map coordinates")
def get_map(
    collection: str,
    request: Request,
    dims: Annotated[int, Query(ge=2, le=3, description="Coordinates per point: 2 or 3.")] = 2,
    t: Annotated[
        float | None,
        Query(gt=0, le=MAX_T, description="Diffusion time; default: the collection's."),
    ] = None,
    fmt: Annotated[Literal["json", "csv"], Query(alias="format")] = "json",
) -> StreamingResponse:
    """Every live document of the active index version with its group, component and
    first ``dims`` diffusion coordinates at time ``t`` (null when isolated or without
    terms; coordinates of different components are not comparable), in internal id
    order, then the provisional documents (added or changed since the build, placed by
    the Nystrom extension). JSON: ``{"collection", "version", "t", "dims", "components",
    "groups", "points": [{"id", "title", "group", "component", "provisional",
    "coords"}]}``; CSV: ``id,title,group,component,provisional,x,y[,z]``. Streamed: the
    whole answer comes from the one index state seen when the request started."""
    index: LiveIndex = request.app.state.live_index
    live = index.get(check_name(collection))
    names = use.group_names(request.app.state.engine, live.view.version.collection_id)
    export = use.prepare_map(live, dims, t, fmt, names)
    if fmt == "csv":
        return StreamingResponse(
            use.csv_chunks(export),
            media_type="text/csv; charset=utf-8",
            headers={"Content-Disposition": f'attachment; filename="{export.filename}"'},
        )
    return StreamingResponse(use.json_chunks(export), media_type="application/json")
