"""Related documents, similar-to-a-draft and diffusion distances."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query, Request, Response
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from service.api.body import read_json
from service.api.deps import READ, settings
from service.api.live import json_response, live_of
from service.errors import InvalidInputError
from service.pipeline import queries as use
from service.pipeline.formatting import validation_details

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


@router.get(
    "/documents/{document_id}/neighbors",
    dependencies=[READ],
    summary="Related documents",
)
async def get_neighbors(
    collection: str, document_id: str, request: Request, k: K = 10, t: T = None
) -> Response:
    """The ``k`` documents nearest this one in diffusion space at time ``t``: id, title,
    diffusion distance (truncated), ``bound`` on the left-out part of its square,
    ``upper`` bound on the distance, cosine similarity, and whether the document is
    provisional (added or changed since the index was built, placed by the Nystrom
    extension). 404 for an unknown document, 422 for one without terms, 409 before the
    first build."""
    live = await live_of(request, collection)
    return json_response(use.neighbors(request.app.state.engine, live, document_id, k, t))


@router.post("/similar", dependencies=[READ], summary="Related documents for a draft")
async def post_similar(collection: str, request: Request) -> Response:
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
    live = await live_of(request, collection)
    return json_response(use.similar(live, draft.text, draft.title, draft.k, draft.t))


@router.get("/distance", dependencies=[READ], summary="Diffusion distance")
async def get_distance(
    collection: str,
    request: Request,
    source: Annotated[str, Query(alias="from", min_length=1, max_length=256)],
    to: Annotated[list[str], Query(min_length=1, max_length=MAX_TARGETS)],
    t: T = None,
) -> Response:
    """The diffusion distance at time ``t`` from ``from`` to each ``to`` (repeat ``to``
    for several targets, at most 100), with its truncation bound. Documents in different
    components are at infinite distance: ``distance`` is null and ``infinite`` true."""
    live = await live_of(request, collection)
    return json_response(use.distance(request.app.state.engine, live, source, to, t))
