"""Related documents, similar-to-a-draft and diffusion distances."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.concurrency import run_in_threadpool
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from service.api.body import read_json
from service.api.deps import READ, settings
from service.errors import InvalidInputError
from service.pipeline import queries as use
from service.pipeline.collections import check_name
from service.pipeline.formatting import validation_details
from service.pipeline.live_index import Live, LiveIndex

router = APIRouter(prefix="/v1/collections/{collection}", tags=["queries"])

MAX_K = 200
MAX_TARGETS = 100
K = Annotated[int, Query(ge=1, le=MAX_K, description="How many related documents.")]
T = Annotated[
    float | None,
    Query(gt=0, le=use.MAX_T, description="Diffusion time; default: the collection's."),
]


class DraftIn(BaseModel):
    """A text that is not in the archive."""

    model_config = ConfigDict(extra="forbid")
    text: str = Field(min_length=1, description="The draft's text.")
    title: str | None = Field(default=None, max_length=1000)
    k: int = Field(default=10, ge=1, le=MAX_K)
    t: float | None = Field(default=None, gt=0, le=use.MAX_T)


def _live(request: Request, collection: str) -> Live:
    index: LiveIndex = request.app.state.live_index
    return index.get(check_name(collection))


@router.get(
    "/documents/{document_id}/neighbors",
    dependencies=[READ],
    summary="Related documents",
)
def get_neighbors(
    collection: str, document_id: str, request: Request, k: K = 10, t: T = None
) -> Any:
    """The ``k`` documents nearest this one in diffusion space at time ``t``: id, title,
    diffusion distance (truncated), ``bound`` on the left-out part of its square,
    ``upper`` bound on the distance, cosine similarity, and whether the document is
    provisional (added or changed since the index was built, placed by the Nystrom
    extension). 404 for an unknown document, 422 for one without terms, 409 before the
    first build."""
    live = _live(request, collection)
    return use.neighbors(request.app.state.engine, live, document_id, k, t)


@router.post("/similar", dependencies=[READ], summary="Related documents for a draft")
async def post_similar(collection: str, request: Request) -> Any:
    """Body ``{"text": ..., "title": null, "k": 10, "t": null}``. The draft is weighted with
    the index's vocabulary and placed by the Nystrom extension; the answer has its
    component, its diffusion coordinates and its related documents. Nothing is stored."""
    limits = settings(request)
    body = await read_json(request, limits.max_body_bytes)
    try:
        draft = DraftIn.model_validate(body)
    except ValidationError as exc:
        raise InvalidInputError("the draft is not valid", validation_details(exc)) from exc
    if len(draft.text.encode("utf-8")) > limits.max_text_bytes:
        raise InvalidInputError(
            f"the text is longer than {limits.max_text_bytes} bytes",
            {"limit": limits.max_text_bytes},
            code="text_too_long",
        )

    def run() -> dict[str, Any]:
        live = _live(request, collection)
        return use.similar(live, draft.text, draft.title, draft.k, draft.t)

    return await run_in_threadpool(run)


@router.get("/distance", dependencies=[READ], summary="Diffusion distance")
def get_distance(
    collection: str,
    request: Request,
    source: Annotated[str, Query(alias="from", min_length=1, max_length=256)],
    to: Annotated[list[str], Query(min_length=1, max_length=MAX_TARGETS)],
    t: T = None,
) -> Any:
    """The diffusion distance at time ``t`` from ``from`` to each ``to`` (repeat ``to``
    for several targets, at most 100), with its truncation bound. Documents in different
    components are at infinite distance: ``distance`` is null and ``infinite`` true."""
    live = _live(request, collection)
    return use.distance(request.app.state.engine, live, source, to, t)
