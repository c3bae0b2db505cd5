"""A build from the database through a worker, with the fake geometry: what is stored and
published, stable group ids across rebuilds, retention, and builds that must fail fast."""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from sqlalchemy import Engine

from service.pipeline.index_content_types import DOC_IDS, STABLE_GROUP
from service.pipeline.index_summary import index_summary
from service.pipeline.stage_clock import StageClock
from service.storage import index_store, jobs
from service.storage.types import utcnow
from tests.build_factories import (
    add_collection,
    array_version_ids,
    collection_row,
    factory,
    queue,
    run_until_finished,
    upsert,
    versions,
    worker,
)
from tests.fake_compute import FAKE_STAGES


def test_a_build_publishes_a_version(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 8)
    job_id = queue(make, "news")
    row = run_until_finished(worker(make), make, job_id)
    assert (row.state, row.attempts, row.error, row.stage) == ("succeeded", 1, None, "publish")
    assert set(row.timings) == {"snapshot", *FAKE_STAGES, "store", "publish"}
    (version,) = versions(make)
    coll = collection_row(make, "news")
    assert coll.active_version_id == version.id == row.version_id
    assert (version.state, version.number, version.n_documents) == ("published", 1, 8)
    assert version.snapshot_change_count == coll.change_count == coll.last_build_change_count
    assert version.parameters["seed"] == 0 and version.parameters["neighbors"] == 15
    with make() as session:
        arrays = index_store.load_arrays(session.connection(), int(version.id))
        groups = index_store.load_clusters(session.connection(), int(version.id))
        summary = index_summary(session, "news")
    assert arrays[DOC_IDS].shape == (8,) and arrays["coordinates"].shape == (8, 2)
    assert sorted(g.stable_id for g in groups) == [0, 1]
    assert sum(g.size for g in groups) == 8
    assert summary["version"] == 1 and summary["documents"] == 8
    assert summary["staleness"] == {
        "added": 0,
        "changed": 0,
        "deleted": 0,
        "total": 0,
        "changes_since": 0,
    }
    assert summary["vocabulary_size"] == version.statistics["vocabulary_size"]


def test_rebuilds_keep_group_ids_and_retire_the_old_version(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 8)
    w = worker(make)
    run_until_finished(w, make, queue(make, "news"))
    upsert(make, "news", [{"id": "late", "text": "harbour tide boats late arrival"}])
    run_until_finished(w, make, queue(make, "news"))
    first, second = versions(make)
    assert (first.state, second.state, second.number) == ("retired", "published", 2)
    with make() as session:
        old = index_store.load_arrays(session.connection(), int(first.id))
        new = index_store.load_arrays(session.connection(), int(second.id))
    before = dict(zip(old[DOC_IDS].tolist(), old[STABLE_GROUP].tolist(), strict=True))
    after = dict(zip(new[DOC_IDS].tolist(), new[STABLE_GROUP].tolist(), strict=True))
    assert all(after[d] == g for d, g in before.items())
    assert collection_row(make, "news").next_group_id == 2


def test_retention_keeps_the_newest_versions(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 6)
    w = worker(make, keep_versions=2)
    for i in range(3):
        upsert(make, "news", [{"id": f"extra-{i}", "text": f"council vote extra{i}"}])
        run_until_finished(w, make, queue(make, "news"))
    kept = versions(make)
    assert [(v.number, v.state) for v in kept] == [(2, "retired"), (3, "published")]
    assert array_version_ids(make) == {int(v.id) for v in kept}


@pytest.mark.parametrize(
    ("docs", "expected"),
    [
        ([], "has no documents yet"),
        (
            [{"id": f"s{i}", "text": "the and of it is"} for i in range(4)],
            "none of the 4 documents",
        ),
        (
            [{"id": "a", "text": "harbour tide"}, {"id": "b", "text": "council vote"}],
            "has 2 documents with terms; a map needs at least 3",
        ),
    ],
    ids=["empty", "no-terms", "two"],
)
def test_too_little_to_map_fails_at_once(
    engine: Engine, docs: list[dict[str, Any]], expected: str
) -> None:
    make = factory(engine)
    add_collection(make, "small", 0)
    if docs:
        upsert(make, "small", docs)
    row = run_until_finished(worker(make), make, queue(make, "small"))
    assert (row.state, row.attempts, row.stage) == ("failed", 1, "snapshot")
    assert expected in row.error
    assert versions(make) == []


def _refusing(snapshot: Any, settings: Any, previous: Any, progress: Any) -> Any:
    progress("fake-vectors", 0.0)
    raise ValueError(f"neighbors={settings.neighbors} must be below n_docs={snapshot.n_docs}")


def _crashing(snapshot: Any, settings: Any, previous: Any, progress: Any) -> Any:
    progress("fake-vectors", 0.0)
    raise RuntimeError("something unforeseen")


@pytest.mark.parametrize(
    ("compute", "expected"),
    [
        (_refusing, "the geometry refused this collection: neighbors=15 must be below n_docs=4"),
        (_crashing, "internal error during stage 'fake-vectors': RuntimeError"),
    ],
    ids=["refused", "crashed"],
)
def test_geometry_failures_are_recorded_without_retry(
    engine: Engine, compute: Any, expected: str
) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    row = run_until_finished(worker(make, compute=compute), make, queue(make, "news"))
    assert (row.state, row.attempts) == ("failed", 1)
    assert expected in row.error
    assert collection_row(make, "news").active_version_id is None


def test_orphaned_building_versions_are_collected(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    coll_id = int(collection_row(make, "news").id)
    with make() as session:
        orphan = index_store.create_version(
            session.connection(),
            collection_id=coll_id,
            parameters={},
            statistics={},
            snapshot_change_count=0,
            n_documents=0,
            now=utcnow(),
        )
        rows = list(index_store.array_rows(orphan, "x", np.zeros(10)))
        index_store.insert_array_rows(session.connection(), rows)
        session.commit()
    worker(make).housekeeping()
    assert versions(make) == [] and array_version_ids(make) == set()


def test_stage_clock_times_stages_and_checks_boundaries() -> None:
    ticks = iter([0.0, 1.0, 3.0, 3.5, 6.0])
    seen: list[str] = []
    clock = StageClock(seen.append, clock=lambda: next(ticks))
    clock("a", 0.0)
    clock("a", 0.5)
    clock("b", 0.0)
    clock("a", 2.0)  # fractions are clamped to [0, 1]
    assert clock.fraction == 1.0
    clock.finish()
    assert seen == ["a", "b", "a"]
    assert clock.timings() == {"a": 4.5, "b": 0.5}  # a: 1->3 and 3.5->6
    assert jobs.FINISHED == ("succeeded", "failed", "cancelled")
