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
