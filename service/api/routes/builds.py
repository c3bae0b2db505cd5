"""Index builds of a collection, and its active index version."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Path, Query, Request, Response
from fastapi.concurrency import run_in_threadpool
from sqlalchemy.orm import Session

from service.api.deps import READ, WRITE, db_session, session_factory, settings
from service.api.schemas import BuildOut, BuildPage, IndexOut
from service.pipeline import builds as use
from service.pipeline.collections import check_name
from service.pipeline.index_summary import index_summary

router = APIRouter(prefix="/v1/collections/{collection}", tags=["builds"])
SessionDep = Annotated[Session, Depends(db_session)]
BuildId = Annotated[int, Path(ge=1, le=2**63 - 1, description="The build's id.")]


@router.post(
    "/builds",
    status_code=202,
    dependencies=[WRITE],
    response_model=BuildOut,
    summary="Start an index build",
    responses={
        202: {"description": "a new build was queued"},
        200: {"description": "a build was already queued or running: that one, existing=true"},
    },
)
async def start_build(collection: str, request: Request, response: Response) -> Any:
    """Queue a build of the collection's current documents (no body). While a build is
    queued or running, no second one is queued: the answer is that build, with
    ``existing: true`` and status 200 instead of 202."""
    check_name(collection)
    attempts = settings(request).build_max_attempts

    def run() -> use.Enqueued:
        with session_factory(request)() as session:
            return use.enqueue_build(session, collection, trigger="api", max_attempts=attempts)

    queued = await run_in_threadpool(run)
    response.status_code = 200 if queued.existing else 202
    response.headers["Location"] = f"/v1/collections/{collection}/builds/{queued.job['id']}"
    return queued.job | {"existing": queued.existing}


@router.get("/builds", dependencies=[READ], response_model=BuildPage, summary="List builds")
def list_builds(
    collection: str,
    session: SessionDep,
    cursor: Annotated[str | None, Query(max_length=200, description="From next_cursor.")] = None,
    limit: Annotated[int, Query(ge=1, le=200)] = 20,
) -> Any:
    """The collection's builds, newest first, a page at a time."""
    return use.list_builds(session, check_name(collection), cursor=cursor, limit=limit)


@router.get(
    "/builds/{build_id}", dependencies=[READ], response_model=BuildOut, summary="Read a build"
)
def get_build(collection: str, build_id: BuildId, session: SessionDep) -> Any:
    """One build: state, stage and fraction done, attempts, error, timings, statistics."""
    return use.get_build(session, check_name(collection), build_id)


@router.delete(
    "/builds/{build_id}",
    dependencies=[WRITE],
    response_model=BuildOut,
    summary="Cancel a build",
    responses={
        200: {"description": "the queued build was cancelled"},
        202: {"description": "the running build stops at its next stage boundary"},
        409: {"description": "the build has already finished"},
    },
)
def cancel_build(
    collection: str, build_id: BuildId, session: SessionDep, response: Response
) -> Any:
    """Cancel a queued build at once (200), or ask a running one to stop at its next stage
    boundary (202, ``cancel_requested: true``); a finished build cannot be cancelled (409)."""
    job = use.cancel_build(session, check_name(collection), build_id)
    response.status_code = 202 if job["state"] == "running" else 200
    return job


@router.get("/index", dependencies=[READ], response_model=IndexOut, summary="The active index")
def get_index(collection: str, session: SessionDep) -> Any:
    """The active index version: number, build time, documents, vocabulary size, edges,
    components, isolated documents, eigenvalues, coordinates kept, groups, and staleness
    (documents added, changed and deleted since its snapshot). 409 (``no_index``) before
    the first build has been published, saying how to start one."""
    return index_summary(session, check_name(collection))
