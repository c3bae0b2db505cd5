"""Validation of one incoming document, shared by the API, the batch paths and the CLI."""

from __future__ import annotations

import hashlib
import json
import re
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, StrictStr, ValidationError, field_validator

from service.errors import InvalidInputError, PayloadTooLargeError
from service.pipeline.formatting import validation_details

# Ids travel in URL paths: no slashes, no spaces, no percent signs.
ID_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._:@~-]*$")
MAX_ID_LENGTH = 256
MAX_METADATA_BYTES = 64 * 1024
# Far inside what the JSON serialiser of the answers can nest (about 250 levels), so a
# stored document always reads back.
MAX_METADATA_DEPTH = 32


class DocumentPayload(BaseModel):
    """A document as a client sends it. Only ``text`` is required."""

    model_config = ConfigDict(extra="forbid", strict=True)

    id: StrictStr | None = Field(default=None, description="External id (batch items).")
    title: StrictStr = Field(default="", description="Headline; may be empty.")
    text: StrictStr = Field(description="Body text; must contain something besides spaces.")
    metadata: dict[str, Any] = Field(default_factory=dict, description="Any JSON object.")
    published_at: StrictStr | None = Field(
        default=None, description="ISO 8601 date or date-time; without an offset it is UTC."
    )

    @field_validator("text")
    @classmethod
    def _text_not_blank(cls, value: str) -> str:
        if not value.strip():
            raise ValueError("text is empty")
        return value

    @field_validator("title", "text")
    @classmethod
    def _no_nul(cls, value: str) -> str:
        # PostgreSQL text cannot hold U+0000; refuse it on every back end alike.
        if "\x00" in value:
            raise ValueError("must not contain the NUL character (U+0000)")
        return value


@dataclass(frozen=True)
class DocumentInput:
    external_id: str
    title: str
    text: str
    metadata: dict[str, Any]
    published_at: datetime | None

    @property
    def content_hash(self) -> str:
        """SHA-256 of the canonical content: equal hashes mean an upsert changes nothing."""
        canonical = json.dumps(
            [
                self.title,
                self.text,
                self.metadata,
                self.published_at.isoformat() if self.published_at else None,
            ],
            sort_keys=True,
            ensure_ascii=False,
            separators=(",", ":"),
        )
        return hashlib.sha256(canonical.encode("utf-8")).hexdigest()


def check_external_id(external_id: Any) -> str:
    if not isinstance(external_id, str) or not external_id:
        raise InvalidInputError("document id must be a non-empty string")
    if len(external_id) > MAX_ID_LENGTH:
        raise InvalidInputError(
            f"document id is {len(external_id)} characters long; at most {MAX_ID_LENGTH}",
            {"field": "id"},
        )
    # fullmatch: with match, `$` would also accept a trailing newline.
    if not ID_PATTERN.fullmatch(external_id):
        raise InvalidInputError(
            f"document id {external_id[:60]!r} may hold only letters, digits and . _ : @ ~ -",
            {"field": "id"},
        )
    return external_id


def _parse_published_at(value: str | None) -> datetime | None:
    if value is None:
        return None
    try:
        parsed = datetime.fromisoformat(value)
        # Converting can leave datetime's range: 0001-01-01T00:00+14:00 is in year 0.
        return parsed.replace(tzinfo=UTC) if parsed.tzinfo is None else parsed.astimezone(UTC)
    except (ValueError, OverflowError) as exc:
        raise InvalidInputError(
            f"published_at {value[:40]!r} is not an ISO 8601 date or date-time "
            "between the years 1 and 9999 in UTC",
            {"field": "published_at"},
        ) from exc


def _nesting_depth(value: Any) -> int:
    """Levels of lists and objects in a JSON value (0 for a scalar), without recursion."""
    deepest, stack = 0, [(value, 0)]
    while stack:
        item, depth = stack.pop()
        if isinstance(item, dict | list):
            deepest = max(deepest, depth + 1)
            stack.extend(
                (v, depth + 1) for v in (item.values() if isinstance(item, dict) else item)
            )
    return deepest


def parse_document(
    raw: Any, *, external_id: str | None = None, max_text_bytes: int
) -> DocumentInput:
    """Validate one document object; the id comes from the URL or from the object itself.

    Raises InvalidInputError (with a ``details`` list naming fields) or
    PayloadTooLargeError when title + text exceed ``max_text_bytes`` in UTF-8.
    """
    if not isinstance(raw, dict):
        raise InvalidInputError(f"a document must be a JSON object, not {type(raw).__name__}")
    try:
        payload = DocumentPayload.model_validate(raw)
    except ValidationError as exc:
        details = validation_details(exc)
        fields = ", ".join(d["field"] for d in details)
        raise InvalidInputError(f"invalid document ({fields})", details) from exc
    if external_id is not None:
        if payload.id is not None and payload.id != external_id:
            raise InvalidInputError(
                f"the body's id {payload.id[:60]!r} differs from the id in the path",
                {"field": "id"},
            )
        chosen = external_id
    elif payload.id is None:
        raise InvalidInputError("a batch item needs an id", {"field": "id"})
    else:
        chosen = payload.id
    check_external_id(chosen)
    size = len(payload.text.encode("utf-8")) + len(payload.title.encode("utf-8"))
    if size > max_text_bytes:
        raise PayloadTooLargeError(
            f"title and text are {size} bytes; the limit is {max_text_bytes}",
            {"field": "text", "bytes": size, "limit": max_text_bytes},
        )
    depth = _nesting_depth(payload.metadata)
    if depth > MAX_METADATA_DEPTH:
        raise InvalidInputError(
            f"metadata is nested {depth} levels deep; at most {MAX_METADATA_DEPTH}",
            {"field": "metadata", "depth": depth, "limit": MAX_METADATA_DEPTH},
        )
    meta_bytes = len(json.dumps(payload.metadata, ensure_ascii=False).encode("utf-8"))
    if meta_bytes > MAX_METADATA_BYTES:
        raise PayloadTooLargeError(
            f"metadata is {meta_bytes} bytes; the limit is {MAX_METADATA_BYTES}",
            {"field": "metadata", "bytes": meta_bytes, "limit": MAX_METADATA_BYTES},
        )
    return DocumentInput(
        external_id=chosen,
        title=payload.title,
        text=payload.text,
        metadata=payload.metadata,
        published_at=_parse_published_at(payload.published_at),
    )
