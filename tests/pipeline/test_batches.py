"""Batch upserts: reports that do not depend on chunking, rollback of a failed chunk,
cursors."""

from __future__ import annotations

import random
from typing import Any

import pytest
from sqlalchemy import Engine

from service.errors import MalformedRequestError
from service.pipeline import collections, documents
from service.storage.session import make_session_factory
from tests.factories import db_snapshot, frequency_recount


def _report(summary: documents.BatchSummary) -> dict[str, Any]:
    return summary.to_dict()


def _run(engine: Engine, batch: list[dict[str, Any]], chunk_size: int) -> dict[str, Any]:
    with make_session_factory(engine)() as session:
        summary = documents.upsert_batch(
            session,
            "c",
            enumerate(batch),
            max_text_bytes=10_000,
            chunk_size=chunk_size,
        )
    return _report(summary)


def _fresh(engine: Engine, seed_docs: list[dict[str, Any]]) -> None:
    with make_session_factory(engine)() as session:
        for name in [c["name"] for c in collections.list_collections(session)]:
            collections.delete_collection(session, name)
        collections.create_collection(session, "c")
        if seed_docs:
            documents.upsert_batch(
                session, "c", enumerate(seed_docs), max_text_bytes=10_000, chunk_size=100
            )


def test_batch_report_is_the_same_for_every_chunk_size(engine: Engine) -> None:
    """Duplicates, updates, unchanged items and rejects, reported per batch: the report
    and the stored documents must not depend on where the chunks are cut."""
    rng = random.Random(5)
    seed = [{"id": f"d{i}", "text": f"tide ferry{i}"} for i in range(0, 12, 2)]
    batch: list[dict[str, Any]] = []
    changed: set[str] = set()
    for _ in range(40):
        ident = f"d{rng.randint(0, 12)}"
        roll = rng.random()
        if roll < 0.1:
            batch.append({"id": ident})  # no text: rejected
        elif roll < 0.3 and ident not in changed:
            # As seeded. Not after a change: restoring the old content in a later chunk
            # is "updated" rather than "unchanged" (documented on BatchSummary).
            batch.append({"id": ident, "text": f"tide ferry{ident[1:]}"})
        else:
            batch.append({"id": ident, "text": f"harbour {rng.randint(0, 3)}x"})
            changed.add(ident)
    reports, states = [], []
    for chunk_size in (1000, 1, 3, 7):
        _fresh(engine, seed)
        reports.append(_run(engine, batch, chunk_size))
        states.append({k: v for k, v in db_snapshot(engine).items() if k != "collections"})
        table, recount = frequency_recount(engine, "c")
        assert table == recount
    assert all(r == reports[0] for r in reports), reports
    codes = {item["error"]["code"] for item in reports[0]["items"] if "error" in item}
    assert codes == {"invalid_input", "duplicate_in_batch"}
    assert {"inserted", "updated", "unchanged"} <= {i["status"] for i in reports[0]["items"]}
    assert all(
        {(d[1], d[2]) for d in s["documents"]} == {(d[1], d[2]) for d in states[0]["documents"]}
        for s in states
    )


def test_a_failing_chunk_rolls_back_whole(engine: Engine, monkeypatch: pytest.MonkeyPatch) -> None:
    _fresh(engine, [{"id": "keep", "text": "harbour"}])
    before = db_snapshot(engine)

    def broken(*_: Any) -> None:
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(documents.repo, "insert_documents", broken)
    with pytest.raises(RuntimeError, match="disk on fire"):
        _run(engine, [{"id": "new", "text": "tide"}, {"id": "keep", "text": "ferry"}], 10)
    assert db_snapshot(engine) == before


def test_cursor_round_trip_and_refusals() -> None:
    for last in (0, 1, 2**40, 2**63 - 1):
        assert documents.decode_cursor(documents.encode_cursor(last)) == last
    for bad in ("", "!!!!", documents.encode_cursor(0)[:-2] + "??", "eyJhZnRlciI6IHRydWV9"):
        with pytest.raises(MalformedRequestError):
            documents.decode_cursor(bad)
