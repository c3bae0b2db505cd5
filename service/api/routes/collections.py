"""Collections and their settings."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request, Response
from fastapi.concurrency import run_in_threadpool
from sqlalchemy.orm import Session

from service.api.body import read_json
from service.api.deps import ADMIN, READ, db_session, session_factory, settings
from service.api.schemas import CollectionCreate, CollectionOut, CollectionPatch
from service.errors import InvalidInputError
from service.pipeline import collections as use

router = APIRouter(prefix="/v1/collections", tags=["collections"])
SessionDep = Annotated[Session, Depends(db_session)]


def _object(body: Any) -> dict[str, Any]:
    if not isinstance(body, dict):
        raise InvalidInputError("the body must be a JSON object")
    return body


@router.post(
    "",
    status_code=201,
    dependencies=[ADMIN],
    response_model=CollectionOut,
    openapi_extra={
        "requestBody": {
            "content": {"application/json": {"schema": CollectionCreate.model_json_schema()}},
            "required": True,
        }
    },
    summary="Create a collection",
)
async def create_collection(request: Request) -> Any:
    """Create a collection with a name and optional settings (defaults for the rest)."""
    body = _object(await read_json(request, settings(request).max_body_bytes))
    unknown = set(body) - {"name", "settings"}
    if unknown:
        raise InvalidInputError(f"unknown fields: {', '.join(sorted(unknown))}")
    if "name" not in body:
        raise InvalidInputError("a collection needs a name", {"field": "name"})

    def run() -> dict[str, Any]:
        with session_factory(request)() as session:
            return use.create_collection(session, body["name"], body.get("settings"))

    return await run_in_threadpool(run)


@router.get("", dependencies=[READ], summary="List collections")
def list_collections(session: SessionDep) -> dict[str, list[CollectionOut]]:
    """Every collection with its settings and document counts, by name."""
    return {"items": [CollectionOut(**c) for c in use.list_collections(session)]}


@router.get(
    "/{collection}", dependencies=[READ], response_model=CollectionOut, summary="Read a collection"
)
def get_collection(collection: str, session: SessionDep) -> Any:
    """One collection: settings (defaults filled in), documents, terms, changes."""
    return use.get_collection(session, collection)


@router.patch(
    "/{collection}",
    dependencies=[ADMIN],
    response_model=CollectionOut,
    openapi_extra={
        "requestBody": {
            "content": {"application/json": {"schema": CollectionPatch.model_json_schema()}},
            "required": True,
        }
    },
    summary="Change a collection's settings",
)
async def update_collection(collection: str, request: Request) -> Any:
    """Change some settings; the others keep their values. Tokenisation settings are fixed
    once documents are stored (409)."""
    body = _object(await read_json(request, settings(request).max_body_bytes))
    unknown = set(body) - {"settings"}
    if unknown:
        raise InvalidInputError(f"unknown fields: {', '.join(sorted(unknown))}")

    def run() -> dict[str, Any]:
        with session_factory(request)() as session:
            return use.update_collection(session, collection, body.get("settings", {}))

    return await run_in_threadpool(run)


@router.delete(
    "/{collection}", status_code=204, dependencies=[ADMIN], summary="Delete a collection"
)
def delete_collection(collection: str, session: SessionDep, request: Request) -> Response:
    """Delete the collection with all its documents and terms, for real."""
    use.delete_collection(session, collection)
    # Its loaded index (ids and titles) leaves this process now; other API processes
    # drop theirs at the next query that names the collection.
    request.app.state.live_index.forget(collection)
    request.app.state.version_cache.forget(collection)
    return Response(status_code=204)
