"""Use cases for documents: upsert (one, a batch, a stream), read, list, delete.

Every write keeps the collection's term table exact: a document's distinct terms add one
to their document frequency, a replaced or deleted document's terms take one away.
"""

from __future__ import annotations

import base64
import binascii
import json
from collections import Counter
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field, replace
from functools import lru_cache
from itertools import chain
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from service.errors import InvalidInputError, MalformedRequestError, NotFoundError, TidemapError
from service.pipeline.collection_settings import CollectionSettings
from service.pipeline.document_input import DocumentInput, check_external_id, parse_document
from service.pipeline.formatting import iso
from service.storage import repository as repo
from service.storage.codecs import decode_counts, decode_many, encode_many
from service.storage.terms import add_terms, apply_df_deltas
from service.storage.types import utcnow
from service.text.tokenize import Tokenizer, make_tokenizer

INSERTED, UPDATED, UNCHANGED, REJECTED = "inserted", "updated", "unchanged", "rejected"


@lru_cache(maxsize=32)
def tokenizer_for(language: str, stemming: bool) -> Tokenizer:
    return make_tokenizer(language, stemming)


def _tokenizer(settings: dict[str, Any]) -> Tokenizer:
    parsed = CollectionSettings.model_validate(settings)
    return tokenizer_for(parsed.language, parsed.stemming)


@dataclass(frozen=True)
class ItemResult:
    index: int
    id: str | None
    status: str
    error: dict[str, Any] | None = None

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"index": self.index, "id": self.id, "status": self.status}
        if self.error is not None:
            out["error"] = self.error
        return out


def _upsert_valid(
    session: Session, collection: str, docs: list[tuple[int, DocumentInput]]
) -> dict[int, str]:
    """Upsert already-validated documents in the session's transaction; index -> status."""
    conn = session.connection()
    locked = repo.lock_collection(conn, collection)
    tokenizer = _tokenizer(locked.settings)
    stored = repo.stored_versions(conn, locked.id, [d.external_id for _, d in docs])
    now = utcnow()
    statuses: dict[int, str] = {}
    pending: list[tuple[int, DocumentInput, str, dict[str, int]]] = []
    for index, doc in docs:
        digest = doc.content_hash
        previous = stored.get(doc.external_id)
        if previous is not None and previous.content_hash == digest:
            statuses[index] = UNCHANGED
            continue
        pending.append((index, doc, digest, tokenizer.count(f"{doc.title}\n{doc.text}")))
    # Every new version adds one to each of its terms; replaced versions take one away.
    counters = [counts for *_, counts in pending]
    ids = add_terms(conn, locked.id, Counter(chain.from_iterable(counters)))
    lengths = [len(c) for c in counters]
    total = sum(lengths)
    flat_ids = np.fromiter(map(ids.__getitem__, chain.from_iterable(counters)), np.int64, total)
    flat_counts = np.fromiter(chain.from_iterable(c.values() for c in counters), np.int64, total)
    blobs = encode_many(lengths, flat_ids, flat_counts)
    inserts: list[dict[str, Any]] = []
    updates: list[dict[str, Any]] = []
    replaced: list[bytes] = []
    for (index, doc, digest, _), blob, n_terms in zip(pending, blobs, lengths, strict=True):
        row = {
            "title": doc.title,
            "text": doc.text,
            "metadata": doc.metadata,
            "published_at": doc.published_at,
            "content_hash": digest,
            "term_counts": blob,
            "n_terms": n_terms,
            "updated_at": now,
        }
        previous = stored.get(doc.external_id)
        if previous is None:
            inserts.append(
                row
                | {"collection_id": locked.id, "external_id": doc.external_id, "created_at": now}
            )
            statuses[index] = INSERTED
        else:
            replaced.append(previous.term_counts)
            updates.append(row | {"doc_id": previous.id})
            statuses[index] = UPDATED
    if replaced:
        old, times = np.unique(decode_many(replaced)[1], return_counts=True)
        apply_df_deltas(conn, dict(zip(old.tolist(), (-times).tolist(), strict=True)))
    # Every row written here carries the change count this transaction ends with, so a
    # build that saw change count C holds exactly the rows with revision <= C.
    revision = locked.change_count + len(inserts) + len(updates)
    for written in (*inserts, *updates):
        written["revision"] = revision
    repo.insert_documents(conn, inserts)
    repo.update_documents(conn, updates)
    repo.bump_change_count(conn, locked.id, len(inserts) + len(updates))
    return statuses


def upsert_document(
    session: Session, collection: str, external_id: str, raw: Any, *, max_text_bytes: int
) -> str:
    """Upsert one document by its external id; returns inserted, updated or unchanged."""
    doc = parse_document(raw, external_id=external_id, max_text_bytes=max_text_bytes)
    status = _upsert_valid(session, collection, [(0, doc)])[0]
    session.commit()
    return status


def _duplicate_error(external_id: str, later: int) -> dict[str, Any]:
    return InvalidInputError(
        f"id {external_id!r} appears again at position {later}; the last occurrence is kept",
        code="duplicate_in_batch",
    ).to_dict()


@dataclass
class BatchSummary:
    """Counts and item results of one batch, however many chunks it was committed in.

    An id repeated in a later chunk is reported as within one chunk: the earlier item
    rejected as a duplicate, the last one kept, and the kept one's status relative to
    the state before the batch (inserted if an earlier item created the document). One
    known difference: a later item that restores the content from before the batch is
    "updated", not "unchanged", since the earlier chunk did change the stored row.
    """

    inserted: int = 0
    updated: int = 0
    unchanged: int = 0
    rejected: int = 0
    items: list[ItemResult] = field(default_factory=list)
    # Per id seen in this batch (one entry per distinct id): the status of its effect so
    # far, and the position of its kept item while that item may still be superseded.
    _status: dict[str, str] = field(default_factory=dict, repr=False)
    _open: dict[str, int] = field(default_factory=dict, repr=False)

    def add(self, result: ItemResult, keep: bool) -> None:
        ident = result.id
        duplicate = result.error is not None and result.error["code"] == "duplicate_in_batch"
        if ident is not None and (result.status != REJECTED or duplicate):
            earlier = self._open.pop(ident, None)
            if earlier is not None:  # kept by an earlier chunk, superseded now
                self._retract(earlier, ident, result.index, keep)
            if result.status != REJECTED:
                before = self._status.get(ident)
                if before in (INSERTED, UPDATED):
                    result = replace(result, status=before)
                self._status[ident] = result.status
                self._open[ident] = result.index
        setattr(self, result.status, getattr(self, result.status) + 1)
        if keep or result.status == REJECTED:
            self.items.append(result)

    def _retract(self, index: int, ident: str, later: int, keep: bool) -> None:
        status = self._status[ident]
        setattr(self, status, getattr(self, status) - 1)
        self.rejected += 1
        rejected = ItemResult(index, ident, REJECTED, _duplicate_error(ident, later))
        if keep:
            self.items = [rejected if item.index == index else item for item in self.items]
        else:
            self.items.append(rejected)

    def to_dict(self) -> dict[str, Any]:
        return {
            "inserted": self.inserted,
            "updated": self.updated,
            "unchanged": self.unchanged,
            "rejected": self.rejected,
            "items": [item.to_dict() for item in sorted(self.items, key=lambda i: i.index)],
        }


def _validate_chunk(
    items: Iterable[tuple[int, Any]], max_text_bytes: int
) -> tuple[list[tuple[int, DocumentInput]], list[ItemResult]]:
    valid: dict[str, tuple[int, DocumentInput]] = {}
    rejected: list[ItemResult] = []
    for index, raw in items:
        if isinstance(raw, TidemapError):  # a line that did not even parse
            rejected.append(ItemResult(index, None, REJECTED, raw.to_dict()))
            continue
        try:
            doc = parse_document(raw, max_text_bytes=max_text_bytes)
        except TidemapError as exc:
            raw_id = raw.get("id") if isinstance(raw, dict) else None
            ident = raw_id if isinstance(raw_id, str) else None
            rejected.append(ItemResult(index, ident, REJECTED, exc.to_dict()))
            continue
        earlier = valid.get(doc.external_id)
        if earlier is not None:
            # Within one batch the last occurrence of an id wins; earlier ones are reported.
            rejected.append(
                ItemResult(
                    earlier[0], doc.external_id, REJECTED, _duplicate_error(doc.external_id, index)
                )
            )
        valid[doc.external_id] = (index, doc)
    return sorted(valid.values(), key=lambda pair: pair[0]), rejected


def upsert_chunk(
    session: Session, collection: str, chunk: list[tuple[int, Any]], *, max_text_bytes: int
) -> list[ItemResult]:
    """Validate and upsert (position, raw object) pairs in one transaction.

    Valid items are stored; invalid ones come back rejected with their reason. If the
    database fails, the whole chunk rolls back and the error propagates.
    """
    valid, rejected = _validate_chunk(chunk, max_text_bytes)
    try:
        statuses = _upsert_valid(session, collection, valid) if valid else {}
        session.commit()
    except BaseException:
        session.rollback()
        raise
    results = rejected + [ItemResult(i, doc.external_id, statuses[i]) for i, doc in valid]
    return sorted(results, key=lambda r: r.index)


def upsert_batch(
    session: Session,
    collection: str,
    items: Iterable[tuple[int, Any]],
    *,
    max_text_bytes: int,
    chunk_size: int,
    report_all: bool = True,
) -> BatchSummary:
    """Upsert (position, raw object) pairs, committing every ``chunk_size`` items.

    With ``report_all`` false only rejected items are listed (the streamed paths, whose
    length is unbounded).
    """
    require_collection(session, collection)
    summary = BatchSummary()
    for chunk in _chunked(items, chunk_size):
        for result in upsert_chunk(session, collection, chunk, max_text_bytes=max_text_bytes):
            summary.add(result, report_all)
    return summary


def require_collection(session: Session, collection: str) -> None:
    """Raise NotFoundError unless the collection exists (checked before reading a stream)."""
    repo.collection_id(session.connection(), collection)
    session.commit()


def _chunked(items: Iterable[tuple[int, Any]], size: int) -> Iterator[list[tuple[int, Any]]]:
    chunk: list[tuple[int, Any]] = []
    for item in items:
        chunk.append(item)
        if len(chunk) >= size:
            yield chunk
            chunk = []
    if chunk:
        yield chunk


def delete_document(session: Session, collection: str, external_id: str) -> None:
    """Delete the document's row (title, text, metadata and vector) for real."""
    check_external_id(external_id)
    conn = session.connection()
    locked = repo.lock_collection(conn, collection)
    blob = repo.delete_document_row(conn, locked.id, external_id)
    if blob is None:
        session.rollback()
        raise NotFoundError(
            f"document {external_id!r} is not in collection {collection!r}",
            {"collection": collection, "id": external_id},
        )
    apply_df_deltas(conn, {int(t): -1 for t in decode_counts(blob)[0]})
    repo.bump_change_count(conn, locked.id, 1)
    session.commit()


def _summary(row: Any) -> dict[str, Any]:
    return {
        "id": row.external_id,
        "title": row.title,
        "metadata": row.metadata,
        "published_at": iso(row.published_at),
        "content_hash": row.content_hash,
        "n_terms": row.n_terms,
        "status": "no_terms" if row.n_terms == 0 else "ok",
        "created_at": iso(row.created_at),
        "updated_at": iso(row.updated_at),
    }


def get_document(session: Session, collection: str, external_id: str) -> dict[str, Any]:
    check_external_id(external_id)
    conn = session.connection()
    row = repo.fetch_document(conn, repo.collection_id(conn, collection), external_id)
    if row is None:
        raise NotFoundError(
            f"document {external_id!r} is not in collection {collection!r}",
            {"collection": collection, "id": external_id},
        )
    return _summary(row) | {"text": row.text}


def encode_cursor(last_id: int, **fields: Any) -> str:
    """An opaque page cursor: the last id given out, plus any ``fields`` (JSON values)."""
    raw = json.dumps({"after": last_id, **fields}, separators=(",", ":")).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def decode_cursor_fields(
    cursor: str, check: Callable[[dict[str, Any]], None] | None = None
) -> dict[str, Any]:
    """The fields of a cursor from `encode_cursor`; ``check`` may raise ValueError on the
    other fields. MalformedRequestError (400, bad_cursor) for anything not given out here."""
    try:
        padded = cursor + "=" * (-len(cursor) % 4)
        value = json.loads(base64.urlsafe_b64decode(padded.encode("ascii")))
        after = value["after"]
        # Ids are 64-bit: a larger value would overflow the query parameter.
        if not isinstance(after, int) or isinstance(after, bool) or not 0 <= after < 2**63:
            raise ValueError(after)
        if check is not None:
            check(value)
        return dict(value)
    except (ValueError, KeyError, TypeError, UnicodeError, binascii.Error) as exc:
        raise MalformedRequestError(
            "the cursor is not one this service gave out; start again without a cursor",
            {"cursor": cursor[:100]},
            code="bad_cursor",
        ) from exc


def decode_cursor(cursor: str) -> int:
    return int(decode_cursor_fields(cursor)["after"])


def list_documents(
    session: Session, collection: str, *, cursor: str | None, limit: int
) -> dict[str, Any]:
    after = decode_cursor(cursor) if cursor else 0
    conn = session.connection()
    rows = repo.page_documents(conn, repo.collection_id(conn, collection), after, limit + 1)
    more = len(rows) > limit
    rows = rows[:limit]
    return {
        "items": [_summary(r) for r in rows],
        "next_cursor": encode_cursor(rows[-1].id) if more and rows else None,
    }
