"""A consistent read of one collection: the input of a build.

Everything is read in one database transaction, so the documents, the dictionary and the
collection's change count belong to one state of the database: on PostgreSQL a REPEATABLE
READ transaction, on SQLite a real transaction (service.storage.session emits BEGIN), and a
WAL reader sees one state however many writers commit meanwhile. Writers are never
blocked: a document stored during the build is simply newer than the snapshot.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray
from sqlalchemy import select
from sqlalchemy.orm import Session

from service.errors import NotFoundError
from service.pipeline.collection_settings import CollectionSettings
from service.storage.codecs import decode_many
from service.storage.models import Collection, Document
from service.storage.terms import TERMS

COLLECTIONS = Collection.__table__
DOCUMENTS = Document.__table__
# Rows fetched per round trip (PostgreSQL streams them with a server-side cursor).
FETCH_ROWS = 10_000


@dataclass(frozen=True)
class Snapshot:
    """A consistent read of one collection; rows are the documents that have terms."""

    collection_id: int
    collection: str
    settings: CollectionSettings
    change_count: int  # collections.change_count seen by the same read
    doc_ids: NDArray[np.int64]  # documents.id, ascending
    external_ids: list[str]
    titles: list[str]
    published_at: NDArray[np.datetime64]  # datetime64[s], NaT where missing
    counts: sp.csr_matrix  # (n_docs, n_terms) int32 raw counts, columns in term_ids order
    term_ids: NDArray[np.int64]  # global term id of each column, ascending
    terms: list[str]  # term string of each column
    # Documents of the snapshot without any term (kept out of the matrix, never dropped
    # silently: the build statistics list them).
    excluded_doc_ids: NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, np.int64))
    excluded_external_ids: list[str] = field(default_factory=list)
    seed: int = 0  # every stochastic step of the build derives its rng from this
    active_version_id: int | None = None  # the version published when the snapshot was read
    next_group_id: int = 0  # collections.next_group_id seen by the same read

    @property
    def n_docs(self) -> int:
        return int(self.doc_ids.shape[0])

    def statistics(self) -> dict[str, Any]:
        """The snapshot's part of the build statistics (JSON-able)."""
        return {
            "snapshot_change_count": self.change_count,
            "documents": self.n_docs,
            "documents_excluded": {"no_terms": int(self.excluded_doc_ids.shape[0])},
            "excluded_examples": self.excluded_external_ids[:20],
            "terms_in_snapshot": int(self.term_ids.shape[0]),
            "term_occurrences": int(self.counts.sum()) if self.counts.nnz else 0,
        }


def _begin_snapshot(session: Session) -> Any:
    """The session's connection, in a transaction that sees one state of the database."""
    if session.get_bind().dialect.name == "postgresql":
        return session.connection(execution_options={"isolation_level": "REPEATABLE READ"})
    return session.connection()


def _datetimes(values: list[datetime | None]) -> NDArray[np.datetime64]:
    naive = [None if v is None else v.replace(tzinfo=None) for v in values]
    return np.array(naive, dtype="datetime64[s]")


def _compact_columns(global_ids: NDArray[np.int64]) -> tuple[NDArray[np.int64], NDArray[np.int32]]:
    """The term ids that occur (ascending) and each entry's column among them.

    A mask over the id range and its running sum instead of np.unique + searchsorted:
    linear in the entries (measured on 10.8 M entries: 1.3 s for unique + searchsorted).
    """
    if global_ids.size == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int32)
    present = np.zeros(int(global_ids.max()) + 1, dtype=bool)
    present[global_ids] = True
    column_of = np.cumsum(present, dtype=np.int32) - 1
    return np.flatnonzero(present).astype(np.int64), column_of[global_ids]


def load_snapshot(session: Session, collection_id: int, *, seed: int = 0) -> Snapshot:
    """Read the collection's documents, dictionary and change count in one transaction.

    One pass over the documents decodes every stored term-count blob at once
    (service.storage.codecs.decode_many); the matrix keeps only the terms that occur.
    The transaction is ended (rolled back: it wrote nothing) before returning.
    """
    try:
        conn = _begin_snapshot(session)
        coll = conn.execute(
            select(
                COLLECTIONS.c.name,
                COLLECTIONS.c.settings,
                COLLECTIONS.c.change_count,
                COLLECTIONS.c.active_version_id,
                COLLECTIONS.c.next_group_id,
            ).where(COLLECTIONS.c.id == collection_id)
        ).first()
        if coll is None:
            raise NotFoundError(f"collection {collection_id} does not exist (deleted?)")
        rows = conn.execution_options(stream_results=True, yield_per=FETCH_ROWS).execute(
            select(
                DOCUMENTS.c.id,
                DOCUMENTS.c.external_id,
                DOCUMENTS.c.title,
                DOCUMENTS.c.published_at,
                DOCUMENTS.c.n_terms,
                DOCUMENTS.c.term_counts,
            )
            .where(DOCUMENTS.c.collection_id == collection_id)
            .order_by(DOCUMENTS.c.id)
        )
        ids: list[int] = []
        external: list[str] = []
        titles: list[str] = []
        dates: list[datetime | None] = []
        blobs: list[bytes] = []
        excluded: list[int] = []
        excluded_ext: list[str] = []
        for doc_id, ext, title, published, n_terms, blob in rows:
            if n_terms == 0:
                excluded.append(doc_id)
                excluded_ext.append(ext)
                continue
            ids.append(doc_id)
            external.append(ext)
            titles.append(title)
            dates.append(published)
            blobs.append(bytes(blob))
        names = dict(
            conn.execute(
                select(TERMS.c.id, TERMS.c.term).where(TERMS.c.collection_id == collection_id)
            ).all()
        )
    finally:
        session.rollback()
    indptr, global_ids, data = decode_many(blobs)
    term_ids, columns = _compact_columns(global_ids)
    counts = sp.csr_matrix(
        (data.astype(np.int32, copy=False), columns, indptr),
        shape=(len(ids), term_ids.shape[0]),
    )
    return Snapshot(
        collection_id=collection_id,
        collection=str(coll.name),
        settings=CollectionSettings.model_validate(coll.settings),
        change_count=int(coll.change_count),
        doc_ids=np.asarray(ids, dtype=np.int64),
        external_ids=external,
        titles=titles,
        published_at=_datetimes(dates),
        counts=counts,
        term_ids=term_ids,
        terms=[names[int(t)] for t in term_ids],
        excluded_doc_ids=np.asarray(excluded, dtype=np.int64),
        excluded_external_ids=excluded_ext,
        seed=seed,
        active_version_id=None if coll.active_version_id is None else int(coll.active_version_id),
        next_group_id=int(coll.next_group_id),
    )
