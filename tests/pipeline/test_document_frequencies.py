"""The term table's document frequencies stay exact under random upserts and deletes."""

from __future__ import annotations

import random
from collections import Counter

from sqlalchemy import Engine, select

from service.pipeline import collections, documents
from service.storage.codecs import decode_counts
from service.storage.models import Document, Term
from service.storage.session import make_session_factory

WORDS = [
    "harbour",
    "tide",
    "ferry",
    "council",
    "budget",
    "school",
    "flood",
    "river",
    "rail",
    "festival",
    "theatre",
]


def _random_text(rng: random.Random) -> str:
    return " ".join(rng.choice(WORDS) for _ in range(rng.randint(0, 12))) or "the of and"


def _recount(engine: Engine, name: str) -> tuple[Counter[str], Counter[str]]:
    """(document frequencies in the term table, the same counted from the stored vectors)."""
    factory = make_session_factory(engine)
    with factory() as session:
        terms = {t.id: t for t in session.scalars(select(Term))}
        stored = Counter(
            {t.term: t.document_frequency for t in terms.values() if t.document_frequency}
        )
        recount: Counter[str] = Counter()
        for blob in session.scalars(select(Document.term_counts)):
            ids, counts = decode_counts(blob)
            assert (counts > 0).all()
            recount.update(terms[int(i)].term for i in ids)
    return stored, recount


def test_random_upserts_and_deletes_keep_exact_frequencies(engine: Engine) -> None:
    rng = random.Random(11)
    factory = make_session_factory(engine)
    with factory() as session:
        collections.create_collection(session, "dfcheck")
    live: set[str] = set()
    for step in range(60):
        with factory() as session:
            if live and rng.random() < 0.3:
                victim = rng.choice(sorted(live))
                documents.delete_document(session, "dfcheck", victim)
                live.discard(victim)
                continue
            batch = []
            for _ in range(rng.randint(1, 15)):
                ident = f"d{rng.randint(0, 40)}"
                batch.append({"id": ident, "title": "", "text": _random_text(rng)})
            summary = documents.upsert_batch(
                session, "dfcheck", enumerate(batch), max_text_bytes=10_000, chunk_size=7
            )
            assert summary.rejected == sum(
                1 for i, d in enumerate(batch) if any(e["id"] == d["id"] for e in batch[i + 1 :])
            ), step
            live.update(d["id"] for d in batch)
    stored, recount = _recount(engine, "dfcheck")
    assert recount, "the random walk should leave documents with terms"
    assert stored == recount


def test_same_content_again_is_unchanged_and_not_a_change(engine: Engine) -> None:
    factory = make_session_factory(engine)
    doc = {"title": "Ferry timetable", "text": "The ferry sails at dawn."}
    with factory() as session:
        collections.create_collection(session, "same")
        assert (
            documents.upsert_document(session, "same", "a", doc, max_text_bytes=10_000)
            == "inserted"
        )
        changes = collections.get_collection(session, "same")["changes"]
        assert (
            documents.upsert_document(session, "same", "a", doc, max_text_bytes=10_000)
            == "unchanged"
        )
        assert collections.get_collection(session, "same")["changes"] == changes
        edited = doc | {"text": "The ferry sails at noon."}
        assert (
            documents.upsert_document(session, "same", "a", edited, max_text_bytes=10_000)
            == "updated"
        )
        assert collections.get_collection(session, "same")["changes"] == changes + 1
