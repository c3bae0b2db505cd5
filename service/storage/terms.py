"""The collection's dictionary: term ids for strings, exact document frequencies."""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from sqlalchemy import Connection, bindparam, select, text
from sqlalchemy.dialects import postgresql, sqlite

from service.storage.models import Term

TERMS = Term.__table__
# Stay below every back end's limit on bound parameters per statement.
CHUNK = 900


def _chunks(items: Sequence[Any], size: int = CHUNK) -> Iterable[Sequence[Any]]:
    for start in range(0, len(items), size):
        yield items[start : start + size]


def add_terms(
    conn: Connection, collection_id: int, increments: Mapping[str, int]
) -> dict[str, int]:
    """Add ``increments[term]`` to each term's document frequency, creating missing terms,
    and return every term's id: one INSERT ... ON CONFLICT DO UPDATE ... RETURNING per
    chunk, so look-up, creation and counting cost a single round trip."""
    found: dict[str, int] = {}
    rows = [
        {"collection_id": collection_id, "term": term, "document_frequency": increments[term]}
        for term in sorted(increments)
    ]
    if not rows:
        return found
    if conn.dialect.name == "postgresql":
        # Two array parameters instead of thousands of placeholders: the driver does not
        # have to parse a huge statement and the server plans it once.
        result = conn.execute(
            text(
                "INSERT INTO terms (collection_id, term, document_frequency) "
                "SELECT :cid, u.term, u.df "
                "FROM unnest(CAST(:terms AS text[]), CAST(:dfs AS integer[])) AS u(term, df) "
                "ON CONFLICT (collection_id, term) DO UPDATE "
                "SET document_frequency = terms.document_frequency + excluded.document_frequency "
                "RETURNING term, id"
            ),
            {
                "cid": collection_id,
                "terms": [r["term"] for r in rows],
                "dfs": [r["document_frequency"] for r in rows],
            },
        )
        return {term: int(tid) for term, tid in result}
    dialect = postgresql if conn.dialect.name == "postgresql" else sqlite
    stmt = dialect.insert(TERMS)
    # executemany of one cached statement: SQLAlchemy batches it ("insertmanyvalues")
    # without compiling a statement per row, and RETURNING still comes back.
    stmt = stmt.on_conflict_do_update(
        index_elements=["collection_id", "term"],
        set_={"document_frequency": TERMS.c.document_frequency + stmt.excluded.document_frequency},
    ).returning(TERMS.c.term, TERMS.c.id)
    found.update({term: int(tid) for term, tid in conn.execute(stmt, rows)})
    return found


def apply_df_deltas(conn: Connection, deltas: Mapping[int, int]) -> None:
    """Add each delta to its term's document frequency, in id order (a fixed lock order
    keeps concurrent PostgreSQL writers from deadlocking)."""
    items = sorted((tid, d) for tid, d in deltas.items() if d != 0)
    if not items:
        return
    if conn.dialect.name == "postgresql":
        # One statement for the whole set instead of one UPDATE per term.
        conn.execute(
            text(
                "UPDATE terms SET document_frequency = terms.document_frequency + u.d "
                "FROM unnest(CAST(:ids AS bigint[]), CAST(:ds AS integer[])) AS u(id, d) "
                "WHERE terms.id = u.id"
            ),
            {"ids": [t for t, _ in items], "ds": [d for _, d in items]},
        )
        return
    conn.execute(
        TERMS.update()
        .where(TERMS.c.id == bindparam("tid"))
        .values(document_frequency=TERMS.c.document_frequency + bindparam("delta")),
        [{"tid": tid, "delta": d} for tid, d in items],
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
