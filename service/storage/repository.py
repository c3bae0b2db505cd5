"""SQL for collections and documents, in SQLAlchemy Core for bulk speed.

Write paths start with `lock_collection`, an UPDATE of the collection row: it serialises
writers per collection (a row lock on PostgreSQL, the write lock on SQLite) before any
read, so a writer never works from a stale snapshot.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Connection, bindparam, case, delete, func, select, update

from service.errors import NotFoundError
from service.storage.index_store import delete_collection_index
from service.storage.models import Collection, Document
from service.storage.terms import CHUNK, TERMS
from service.storage.types import utcnow

COLLECTIONS = Collection.__table__
DOCUMENTS = Document.__table__


@dataclass(frozen=True)
class LockedCollection:
    id: int
    name: str
    settings: dict[str, Any]
    # The change count before this transaction's changes (documents.revision).
    change_count: int = 0


def lock_collection(conn: Connection, name: str) -> LockedCollection:
    row = conn.execute(
        update(COLLECTIONS)
        .where(COLLECTIONS.c.name == name)
        .values(updated_at=utcnow())
        .returning(COLLECTIONS.c.id, COLLECTIONS.c.settings, COLLECTIONS.c.change_count)
    ).first()
    if row is None:
        raise NotFoundError(f"collection {name!r} does not exist", {"collection": name})
    return LockedCollection(
        id=int(row.id), name=name, settings=dict(row.settings), change_count=int(row.change_count)
    )


def hold_collection(
    conn: Connection, *, name: str | None = None, coll_id: int | None = None
) -> Any:
    """Lock the collection row without changing it (a no-op UPDATE: the row lock on
    PostgreSQL, the write lock on SQLite) and return it, or None when there is none.

    For use cases that must be serialised per collection but do not change it (queueing
    a build, the re-index schedule)."""
    if (name is None) == (coll_id is None):
        raise ValueError("give the collection's name or its id")
    where = COLLECTIONS.c.name == name if name is not None else COLLECTIONS.c.id == coll_id
    return conn.execute(
        update(COLLECTIONS)
        .where(where)
        .values(change_count=COLLECTIONS.c.change_count)
        .returning(*COLLECTIONS.c)
    ).first()


def collection_id(conn: Connection, name: str) -> int:
    found = conn.execute(select(COLLECTIONS.c.id).where(COLLECTIONS.c.name == name)).scalar()
    if found is None:
        raise NotFoundError(f"collection {name!r} does not exist", {"collection": name})
    return int(found)


def bump_change_count(conn: Connection, coll_id: int, changes: int) -> None:
    if changes:
        conn.execute(
            update(COLLECTIONS)
            .where(COLLECTIONS.c.id == coll_id)
            .values(change_count=COLLECTIONS.c.change_count + changes)
        )


@dataclass(frozen=True)
class StoredVersion:
    """What an upsert needs to know of a document already stored."""

    id: int
    content_hash: str
    term_counts: bytes


def stored_versions(
    conn: Connection, coll_id: int, external_ids: Sequence[str]
) -> dict[str, StoredVersion]:
    found: dict[str, StoredVersion] = {}
    for start in range(0, len(external_ids), CHUNK):
        chunk = external_ids[start : start + CHUNK]
        rows = conn.execute(
            select(
                DOCUMENTS.c.external_id,
                DOCUMENTS.c.id,
                DOCUMENTS.c.content_hash,
                DOCUMENTS.c.term_counts,
            ).where(DOCUMENTS.c.collection_id == coll_id, DOCUMENTS.c.external_id.in_(chunk))
        )
        for ext, doc_id, digest, blob in rows:
            found[ext] = StoredVersion(int(doc_id), digest, bytes(blob))
    return found


def insert_documents(conn: Connection, rows: list[dict[str, Any]]) -> None:
    if rows:
        conn.execute(DOCUMENTS.insert(), rows)


def update_documents(conn: Connection, rows: list[dict[str, Any]]) -> None:
    """Rewrite stored documents; each row carries its primary key as ``doc_id``."""
    if not rows:
        return
    columns = [k for k in rows[0] if k != "doc_id"]
    conn.execute(
        DOCUMENTS.update()
        .where(DOCUMENTS.c.id == bindparam("doc_id"))
        .values({c: bindparam(c) for c in columns}),
        rows,
    )


def delete_document_row(conn: Connection, coll_id: int, external_id: str) -> bytes | None:
    """Delete the row for real; return its term counts (None if there was none)."""
    row = conn.execute(
        delete(DOCUMENTS)
        .where(DOCUMENTS.c.collection_id == coll_id, DOCUMENTS.c.external_id == external_id)
        .returning(DOCUMENTS.c.term_counts)
    ).first()
    return None if row is None else bytes(row.term_counts)


def delete_collection_rows(conn: Connection, coll_id: int) -> None:
    # Explicit deletes rather than trusting ON DELETE CASCADE to be enabled.
    delete_collection_index(conn, coll_id)
    conn.execute(delete(DOCUMENTS).where(DOCUMENTS.c.collection_id == coll_id))
    conn.execute(delete(TERMS).where(TERMS.c.collection_id == coll_id))
    conn.execute(delete(COLLECTIONS).where(COLLECTIONS.c.id == coll_id))


DOCUMENT_FIELDS = (
    DOCUMENTS.c.id,
    DOCUMENTS.c.external_id,
    DOCUMENTS.c.title,
    DOCUMENTS.c["metadata"],
    DOCUMENTS.c.published_at,
    DOCUMENTS.c.content_hash,
    DOCUMENTS.c.n_terms,
    DOCUMENTS.c.created_at,
    DOCUMENTS.c.updated_at,
)


def fetch_document(conn: Connection, coll_id: int, external_id: str) -> Any:
    return conn.execute(
        select(*DOCUMENT_FIELDS, DOCUMENTS.c.text).where(
            DOCUMENTS.c.collection_id == coll_id, DOCUMENTS.c.external_id == external_id
        )
    ).first()


def page_documents(conn: Connection, coll_id: int, after_id: int, limit: int) -> list[Any]:
    return list(
        conn.execute(
            select(*DOCUMENT_FIELDS)
            .where(DOCUMENTS.c.collection_id == coll_id, DOCUMENTS.c.id > after_id)
            .order_by(DOCUMENTS.c.id)
            .limit(limit)
        )
    )


def document_counts(conn: Connection, coll_id: int) -> tuple[int, int]:
    """(documents, documents without terms)."""
    total, empty = conn.execute(
        select(
            func.count(),
            func.coalesce(func.sum(case((DOCUMENTS.c.n_terms == 0, 1), else_=0)), 0),
        ).where(DOCUMENTS.c.collection_id == coll_id)
    ).one()
    return int(total), int(empty)
