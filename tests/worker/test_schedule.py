"""The re-index schedule: after M changes or every N seconds, never twice at once."""

from __future__ import annotations

import threading
from datetime import timedelta

from sqlalchemy import Engine, func, select

from service.pipeline.builds import reindex_due
from service.pipeline.collection_settings import CollectionSettings
from service.storage.models import Job
from service.storage.session import make_engine
from service.storage.types import utcnow
from service.worker.schedule import run_schedule
from tests.build_factories import (
    add_collection,
    collection_row,
    factory,
    queue,
    run_until_finished,
    upsert,
    worker,
)


def _jobs(make: object) -> int:
    with make() as session:  # type: ignore[operator]
        return int(session.execute(select(func.count()).select_from(Job)).scalar_one())


def test_after_changes(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4, {"reindex": {"after_changes": 3}})
    # Four documents stored: due; the schedule queues one build, and only one.
    assert len(run_schedule(make, now=utcnow(), max_attempts=3)) == 1
    assert run_schedule(make, now=utcnow(), max_attempts=3) == []
    w = worker(make, schedule=False)
    run_until_finished(w, make, 1)
    upsert(make, "news", [{"id": f"x{i}", "text": f"harbour news x{i}"} for i in range(2)])
    assert run_schedule(make, now=utcnow(), max_attempts=3) == []  # 2 changes < 3
    upsert(make, "news", [{"id": "x2", "text": "harbour news x2"}])
    (job_id,) = run_schedule(make, now=utcnow(), max_attempts=3)
    assert run_until_finished(w, make, job_id).trigger == "schedule"


def test_every_seconds_needs_a_change(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4, {"reindex": {"every_seconds": 3600}})
    run_until_finished(worker(make, schedule=False), make, queue(make, "news"))
    later = utcnow() + timedelta(hours=2)
    assert run_schedule(make, now=later, max_attempts=3) == []  # nothing changed
    upsert(make, "news", [{"id": "x", "text": "council vote"}])
    assert run_schedule(make, now=utcnow(), max_attempts=3) == []  # not an hour yet
    assert len(run_schedule(make, now=later, max_attempts=3)) == 1
    assert collection_row(make, "news").last_build_at is not None


def test_workers_running_the_schedule_at_once_queue_one_build(
    database_url: str, engine: Engine
) -> None:
    make = factory(engine)
    for name in ("a", "b", "c"):
        add_collection(make, name, 3, {"reindex": {"after_changes": 1}})
    engines = [make_engine(database_url) for _ in range(4)]
    barrier = threading.Barrier(len(engines))
    queued: list[int] = []

    def tick(eng: Engine) -> None:
        barrier.wait()
        queued.extend(run_schedule(factory(eng), now=utcnow(), max_attempts=3))

    threads = [threading.Thread(target=tick, args=(e,)) for e in engines]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    for eng in engines:
        eng.dispose()
    assert len(queued) == len(set(queued)) == 3 == _jobs(make)


def test_reindex_due_rules() -> None:
    now = utcnow()
    policy = CollectionSettings.model_validate(
        {"reindex": {"every_seconds": 60, "after_changes": 10}}
    )
    old = now - timedelta(seconds=61)
    assert (
        reindex_due(policy, changes=10, last_build_at=now, created_at=old, now=now)
        == "after_changes"
    )
    assert (
        reindex_due(policy, changes=1, last_build_at=old, created_at=old, now=now)
        == "every_seconds"
    )
    assert (
        reindex_due(policy, changes=1, last_build_at=None, created_at=old, now=now)
        == "every_seconds"
    )
    assert reindex_due(policy, changes=1, last_build_at=now, created_at=old, now=now) is None
    assert reindex_due(policy, changes=0, last_build_at=old, created_at=old, now=now) is None
    assert (
        reindex_due(CollectionSettings(), changes=99, last_build_at=old, created_at=old, now=now)
        is None
    )
