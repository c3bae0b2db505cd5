"""The collection's dictionary: term ids for strings, exact document frequencies."""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from sqlalchemy import Connection, bindparam, select
from sqlalchemy.dialects import postgresql, sqlite

from service.storage.models import Term

TERMS = Term.__table__
# Stay below every back end's limit on bound parameters per statement.
CHUNK = 900


def _chunks(items: Sequence[Any], size: int = CHUNK) -> Iterable[Sequence[Any]]:
    for start in range(0, len(items), size):
        yield items[start : start + size]


def _insert_ignoring_existing(conn: Connection) -> Any:
    dialect = postgresql if conn.dialect.name == "postgresql" else sqlite
    return dialect.insert(TERMS).on_conflict_do_nothing(index_elements=["collection_id", "term"])


def term_ids(conn: Connection, collection_id: int, terms: Iterable[str]) -> dict[str, int]:
    """Ids for every term, creating the missing ones (safe under concurrent writers)."""
    wanted = sorted(set(terms))
    found: dict[str, int] = {}
    for chunk in _chunks(wanted):
        rows = conn.execute(
            select(TERMS.c.term, TERMS.c.id).where(
                TERMS.c.collection_id == collection_id, TERMS.c.term.in_(chunk)
            )
        )
        found.update({term: int(tid) for term, tid in rows})
    missing = [t for t in wanted if t not in found]
    if missing:
        conn.execute(
            _insert_ignoring_existing(conn),
            [{"collection_id": collection_id, "term": t, "document_frequency": 0} for t in missing],
        )
        for chunk in _chunks(missing):
            rows = conn.execute(
                select(TERMS.c.term, TERMS.c.id).where(
                    TERMS.c.collection_id == collection_id, TERMS.c.term.in_(chunk)
                )
            )
            found.update({term: int(tid) for term, tid in rows})
    return found


def apply_df_deltas(conn: Connection, deltas: Mapping[int, int]) -> None:
    """Add each delta to its term's document frequency, in id order (a fixed lock order
    keeps concurrent PostgreSQL writers from deadlocking)."""
    rows = [{"tid": tid, "delta": d} for tid, d in sorted(deltas.items()) if d != 0]
    if not rows:
        return
    conn.execute(
        TERMS.update()
        .where(TERMS.c.id == bindparam("tid"))
        .values(document_frequency=TERMS.c.document_frequency + bindparam("delta")),
        rows,
    )


def document_frequencies(conn: Connection, collection_id: int) -> dict[str, int]:
    """Every term with a positive document frequency."""
    rows = conn.execute(
        select(TERMS.c.term, TERMS.c.document_frequency).where(
            TERMS.c.collection_id == collection_id, TERMS.c.document_frequency > 0
        )
    )
    return {term: int(df) for term, df in rows}


def terms_by_id(conn: Connection, collection_id: int) -> dict[int, str]:
    rows = conn.execute(
        select(TERMS.c.id, TERMS.c.term).where(TERMS.c.collection_id == collection_id)
    )
    return {int(tid): term for tid, term in rows}
