"""Documents: upsert one, upsert a batch (JSON list or NDJSON stream), read, list, delete."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request, Response
from fastapi.concurrency import run_in_threadpool
from sqlalchemy.orm import Session

from service.api.body import ndjson_lines, read_json
from service.api.deps import READ, WRITE, db_session, session_factory, settings
from service.api.schemas import (
    BATCH_BODY,
    DOCUMENT_BODY,
    BatchOut,
    DocumentOut,
    DocumentPage,
    UpsertResult,
)
from service.errors import InvalidInputError, PayloadTooLargeError
from service.pipeline import documents as use
from service.pipeline.collections import check_name

router = APIRouter(prefix="/v1/collections/{collection}/documents", tags=["documents"])
SessionDep = Annotated[Session, Depends(db_session)]


@router.put(
    "/{document_id}",
    dependencies=[WRITE],
    response_model=UpsertResult,
    openapi_extra={"requestBody": DOCUMENT_BODY},
    summary="Create or replace one document",
    responses={201: {"description": "inserted"}, 200: {"description": "updated or unchanged"}},
)
async def put_document(
    collection: str, document_id: str, request: Request, response: Response
) -> Any:
    """Upsert by external id. Sending the same content again changes nothing
    (``unchanged``) and does not count as a change."""
    check_name(collection)
    limits = settings(request)
    body = await read_json(request, limits.max_body_bytes)

    def run() -> str:
        with session_factory(request)() as session:
            return use.upsert_document(
                session, collection, document_id, body, max_text_bytes=limits.max_text_bytes
            )

    status = await run_in_threadpool(run)
    response.status_code = 201 if status == use.INSERTED else 200
    return {"id": document_id, "status": status}


@router.post(
    "",
    dependencies=[WRITE],
    response_model=BatchOut,
    openapi_extra={"requestBody": BATCH_BODY},
    summary="Upsert many documents (JSON list or NDJSON)",
)
async def post_documents(collection: str, request: Request) -> Any:
    """A JSON list (at most ``max_batch_items``; every item reported) or an NDJSON stream
    of any length (``Content-Type: application/x-ndjson``; committed in chunks, only
    rejected lines reported, by line number from 1). Valid items are stored even when
    others are rejected."""
    check_name(collection)
    limits = settings(request)
    factory = session_factory(request)
    content_type = request.headers.get("content-type", "").split(";")[0].strip().lower()

    def run_chunk(chunk: list[tuple[int, Any]]) -> list[use.ItemResult]:
        with factory() as session:
            return use.upsert_chunk(
                session, collection, chunk, max_text_bytes=limits.max_text_bytes
            )

    def exists() -> None:
        with factory() as session:
            use.require_collection(session, collection)

    await run_in_threadpool(exists)
    summary = use.BatchSummary()
    if content_type in ("application/x-ndjson", "application/ndjson", "application/jsonl"):
        chunk: list[tuple[int, Any]] = []
        line_limit = limits.max_text_bytes * 2 + 65536
        async for item in ndjson_lines(request, line_limit):
            chunk.append(item)
            if len(chunk) >= limits.ndjson_chunk_size:
                for result in await run_in_threadpool(run_chunk, chunk):
                    summary.add(result, keep=False)
                chunk = []
        if chunk:
            for result in await run_in_threadpool(run_chunk, chunk):
                summary.add(result, keep=False)
        return summary.to_dict()
    body = await read_json(request, limits.max_body_bytes)
    if isinstance(body, dict) and set(body) == {"documents"}:
        body = body["documents"]
    if not isinstance(body, list):
        raise InvalidInputError(
            'send a JSON list of documents (or {"documents": [...]}), or NDJSON with '
            "Content-Type: application/x-ndjson"
        )
    if len(body) > limits.max_batch_items:
        raise PayloadTooLargeError(
            f"{len(body)} documents in one list; the limit is {limits.max_batch_items} "
            "(send NDJSON for more)",
            {"items": len(body), "limit": limits.max_batch_items},
        )
    if not body:
        raise InvalidInputError("the list of documents is empty")
    for result in await run_in_threadpool(run_chunk, list(enumerate(body))):
        summary.add(result, keep=True)
    return summary.to_dict()


@router.get("", dependencies=[READ], response_model=DocumentPage, summary="List documents")
def list_documents(
    collection: str,
    session: SessionDep,
    cursor: Annotated[str | None, Query(max_length=200, description="From next_cursor.")] = None,
    limit: Annotated[int, Query(ge=1, le=1000)] = 100,
) -> Any:
    """Documents in the order they were first stored, without their text, a page at a time."""
    return use.list_documents(session, check_name(collection), cursor=cursor, limit=limit)


@router.get(
    "/{document_id}", dependencies=[READ], response_model=DocumentOut, summary="Read a document"
)
def get_document(collection: str, document_id: str, session: SessionDep) -> Any:
    """One document with its text and its term status (``no_terms`` when nothing is left
    after tokenisation: such documents are left out of the graph)."""
    return use.get_document(session, check_name(collection), document_id)


@router.delete("/{document_id}", status_code=204, dependencies=[WRITE], summary="Delete a document")
def delete_document(collection: str, document_id: str, session: SessionDep) -> Response:
    """Delete the document's text, metadata and term vector for real."""
    use.delete_document(session, check_name(collection), document_id)
    return Response(status_code=204)
