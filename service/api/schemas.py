"""Response and request shapes, for validation of answers and for the OpenAPI schema."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, Field

from service.pipeline.collection_settings import CollectionSettings
from service.pipeline.document_input import DocumentPayload


class CollectionCreate(BaseModel):
    name: str = Field(pattern=r"^[a-z0-9][a-z0-9_-]{0,63}$")
    settings: CollectionSettings | None = None


class CollectionPatch(BaseModel):
    settings: dict[str, Any] = Field(description="Only the settings to change.")


class CollectionOut(BaseModel):
    name: str
    settings: CollectionSettings
    documents: int
    documents_without_terms: int
    terms: int
    changes: int
    created_at: str
    updated_at: str


class DocumentSummary(BaseModel):
    id: str
    title: str
    metadata: dict[str, Any]
    published_at: str | None
    content_hash: str
    n_terms: int
    status: str = Field(description="'ok', or 'no_terms' when the text yields no terms.")
    created_at: str
    updated_at: str


class DocumentOut(DocumentSummary):
    text: str


class DocumentPage(BaseModel):
    items: list[DocumentSummary]
    next_cursor: str | None


class UpsertResult(BaseModel):
    id: str
    status: str = Field(description="inserted, updated or unchanged")


class ItemOut(BaseModel):
    index: int = Field(description="Position in the list (from 0) or NDJSON line (from 1).")
    id: str | None
    status: str
    error: dict[str, Any] | None = None


class BatchOut(BaseModel):
    inserted: int
    updated: int
    unchanged: int
    rejected: int
    items: list[ItemOut]


BATCH_BODY = {
    "required": True,
    "content": {
        "application/json": {
            "schema": {"type": "array", "items": DocumentPayload.model_json_schema()}
        },
        "application/x-ndjson": {"schema": {"type": "string"}},
    },
}
DOCUMENT_BODY = {
    "required": True,
    "content": {"application/json": {"schema": DocumentPayload.model_json_schema()}},
}


class LeaseOut(BaseModel):
    owner: str
    expires_at: str | None


class BuildOut(BaseModel):
    id: int
    collection: str
    kind: str
    state: str = Field(description="queued, running, succeeded, failed or cancelled")
    stage: str | None = Field(description="The stage running or last run.")
    progress: float = Field(description="Fraction of the stage done, 0 to 1.")
    attempts: int
    max_attempts: int
    trigger: str = Field(description="api, cli or schedule")
    cancel_requested: bool
    error: str | None = Field(description="Why it failed, or why it is being retried.")
    timings: dict[str, float] = Field(description="Seconds per stage.")
    statistics: dict[str, Any]
    version: int | None = Field(description="The index version it published.")
    lease: LeaseOut | None
    retry_after: str | None = Field(description="A re-queued build waits until then.")
    created_at: str | None
    started_at: str | None
    finished_at: str | None
    existing: bool | None = Field(
        default=None, description="On POST: true when this build was already queued or running."
    )


class BuildPage(BaseModel):
    items: list[BuildOut]
    next_cursor: str | None


class Staleness(BaseModel):
    added: int
    changed: int
    deleted: int
    total: int
    changes_since: int = Field(description="Changes counted since the snapshot.")


class IndexOut(BaseModel):
    collection: str
    version: int
    built_at: str | None
    documents: int = Field(description="Documents in the map (with terms).")
    documents_excluded: dict[str, Any] = Field(description="Left out, by reason.")
    vocabulary_size: int | None
    edges: int | None
    components: int | None
    isolated: int | None
    eigenvalues: list[Any] | None
    coordinates: int | None = Field(description="Diffusion coordinates kept.")
    groups: int | None
    parameters: dict[str, Any]
    staleness: Staleness
    building: dict[str, Any] | None = Field(description="A build queued or running now.")
