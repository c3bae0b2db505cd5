"""Groups of the active index: list, one group with its members, editor names."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Query, Request, Response
from fastapi.concurrency import run_in_threadpool

from service.api.body import read_json
from service.api.deps import READ, WRITE, settings
from service.api.encoded_answers import EncodedAnswers
from service.api.live import JSON_TYPE, json_response
from service.errors import InvalidInputError
from service.pipeline import clusters as use
from service.pipeline.collections import check_name
from service.pipeline.live_index import Live, LiveIndex

router = APIRouter(prefix="/v1/collections/{collection}/clusters", tags=["clusters"])

# The group list by live state and editor names (both read on every request).
_group_lists = EncodedAnswers()

NAME_BODY = {
    "content": {
        "application/json": {
            "schema": {
                "type": "object",
                "properties": {
                    "name": {"type": ["string", "null"], "maxLength": use.MAX_NAME},
                },
                "required": ["name"],
                "additionalProperties": False,
            }
        }
    },
    "required": True,
}


def _live(request: Request, collection: str) -> Live:
    index: LiveIndex = request.app.state.live_index
    return index.get(check_name(collection))


@router.get("", dependencies=[READ], summary="Groups")
def list_clusters(collection: str, request: Request) -> Any:
    """Every group of the active index, largest first: stable id, editor name (or null),
    live size (deleted documents left out, provisional ones counted), label terms,
    representative documents, counts by month of ``published_at`` (``month`` null for
    undated documents) and how many members are provisional. ``ungrouped`` counts the
    documents in no group (isolated, or without terms). 409 before the first build."""
    live = _live(request, collection)
    engine = request.app.state.engine
    names = use.group_names(engine, live.view.version.collection_id)

    def encode() -> bytes:
        return bytes(json_response(use.list_groups(engine, live, names)).body)

    key = tuple(sorted(names.items()))
    return Response(_group_lists.get_or_make(live, key, encode), media_type=JSON_TYPE)


@router.get("/{group_id}", dependencies=[READ], summary="One group and its members")
def get_cluster(
    collection: str,
    group_id: int,
    request: Request,
    cursor: Annotated[str | None, Query(max_length=200, description="From next_cursor.")] = None,
    limit: Annotated[int, Query(ge=1, le=use.MAX_LIMIT)] = 50,
) -> Any:
    """The group (as in the list) and a page of its members (id, title, published_at,
    provisional): indexed members by internal id, then provisional ones. Follow
    ``next_cursor`` until it is null. 404 for a group not in the active index."""
    live = _live(request, collection)
    return use.get_group(request.app.state.engine, live, group_id, cursor=cursor, limit=limit)


@router.patch(
    "/{group_id}",
    dependencies=[WRITE],
    openapi_extra={"requestBody": NAME_BODY},
    summary="Name a group",
)
async def patch_cluster(collection: str, group_id: int, request: Request) -> Any:
    """Body ``{"name": "Harbour works"}`` (1 to 200 characters after stripping; null or
    blank removes the name). The name belongs to the stable id, so it follows the group
    across rebuilds. Answers with the group."""
    body = await read_json(request, settings(request).max_body_bytes)
    if not isinstance(body, dict) or set(body) != {"name"}:
        raise InvalidInputError(
            'send a JSON object with one field, {"name": "..."} or {"name": null}',
            [{"field": "name", "problem": 'the body must be {"name": string | null}'}],
        )

    def run() -> dict[str, Any]:
        live = _live(request, collection)
        return use.rename_group(request.app.state.engine, live, group_id, body["name"])

    return await run_in_threadpool(run)
