"""The snapshot holds exactly the stored documents and their counts, with documents
without terms listed apart."""

from __future__ import annotations

import numpy as np
from sqlalchemy import Engine, select

from service.pipeline.snapshot import load_snapshot
from service.storage.codecs import decode_counts
from service.storage.models import Document, Term
from tests.build_factories import add_collection, collection_row, factory, upsert


def test_snapshot_matches_the_stored_documents(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "snap", 6)
    upsert(make, "snap", [{"id": "empty", "text": "the and of it"}])
    upsert(
        make,
        "snap",
        [{"id": "dated", "text": "harbour tide", "published_at": "2021-03-04T10:00:05Z"}],
    )
    add_collection(make, "other", 2)
    coll = collection_row(make, "snap")
    with make() as session:
        snap = load_snapshot(session, int(coll.id), seed=7)
        rows = session.execute(
            select(Document.id, Document.external_id, Document.term_counts, Document.n_terms)
            .where(Document.collection_id == coll.id)
            .order_by(Document.id)
        ).all()
        names = dict(session.execute(select(Term.id, Term.term)).all())
    with_terms = [r for r in rows if r.n_terms > 0]
    assert snap.doc_ids.tolist() == [r.id for r in with_terms]
    assert snap.external_ids == [r.external_id for r in with_terms]
    assert snap.excluded_external_ids == ["empty"]
    assert snap.change_count == int(coll.change_count) == 8
    assert snap.seed == 7 and snap.collection == "snap"
    assert snap.counts.dtype == np.int32 and snap.counts.shape == (7, snap.term_ids.shape[0])
    assert np.all(np.diff(snap.term_ids) > 0)
    for i, row in enumerate(with_terms):
        ids, counts = decode_counts(row.term_counts)
        dense = snap.counts.getrow(i)
        got = {snap.terms[c]: int(v) for c, v in zip(dense.indices, dense.data, strict=True)}
        assert got == {names[int(t)]: int(c) for t, c in zip(ids, counts, strict=True)}
    dated = snap.external_ids.index("dated")
    assert str(snap.published_at[dated]) == "2021-03-04T10:00:05"
    assert np.isnat(snap.published_at[0])
    assert snap.statistics()["documents_excluded"] == {"no_terms": 1}


def test_snapshot_of_an_empty_collection(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "none", 0)
    with make() as session:
        snap = load_snapshot(session, int(collection_row(make, "none").id))
    assert snap.n_docs == 0 and snap.counts.shape == (0, 0) and snap.terms == []
