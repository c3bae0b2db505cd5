"""The job queue: one claim per job, one active build per collection, leases that run
out, back-off, a readable reason when attempts are used up, fencing, cancellation."""

from __future__ import annotations

import threading
from datetime import timedelta
from typing import Any

import pytest
from sqlalchemy import Engine, update
from sqlalchemy.exc import IntegrityError

from service.errors import ConflictError, NotFoundError
from service.pipeline.builds import cancel_build, enqueue_build, list_builds
from service.storage import jobs
from service.storage.jobs import Lease
from service.storage.session import make_engine
from service.storage.types import utcnow
from service.worker.worker import backoff_seconds
from tests.build_factories import (
    add_collection,
    collection_row,
    factory,
    job,
    queue,
    run_until_finished,
    versions,
    wait_for,
    worker,
)
from tests.fake_compute import FakeCompute


def test_a_second_request_returns_the_queued_build(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    with make() as session:
        first = enqueue_build(session, "news", trigger="api", max_attempts=3)
        again = enqueue_build(session, "news", trigger="cli", max_attempts=3)
    assert not first.existing and again.existing
    assert again.job["id"] == first.job["id"] and again.job["trigger"] == "api"
    with make() as session, pytest.raises(NotFoundError):
        enqueue_build(session, "nope", trigger="api", max_attempts=3)


def test_the_database_refuses_two_active_builds_of_one_collection(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    queue(make, "news")
    coll_id = int(collection_row(make, "news").id)
    with make() as session, pytest.raises(IntegrityError):
        jobs.insert_job(
            session.connection(), collection_id=coll_id, trigger="api", max_attempts=3, now=utcnow()
        )


def test_concurrent_claims_hand_a_job_to_one_worker(database_url: str, engine: Engine) -> None:
    make = factory(engine)
    for name in ("a", "b"):
        add_collection(make, name, 3)
        queue(make, name)
    engines = [make_engine(database_url) for _ in range(6)]
    barrier = threading.Barrier(len(engines))
    claimed: list[int | None] = []

    def claim(eng: Engine, owner: str) -> None:
        barrier.wait()
        with factory(eng)() as session:
            row = jobs.claim(session.connection(), owner=owner, lease_seconds=30, now=utcnow())
            session.commit()
        claimed.append(None if row is None else int(row.id))

    threads = [threading.Thread(target=claim, args=(eng, f"w{i}")) for i, eng in enumerate(engines)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    for eng in engines:
        eng.dispose()
    got = sorted(c for c in claimed if c is not None)
    assert got == [1, 2] and claimed.count(None) == 4


def _expire(make: object, job_id: int) -> None:
    with make() as session:  # type: ignore[operator]
        session.execute(
            update(jobs.JOBS)
            .where(jobs.JOBS.c.id == job_id)
            .values(lease_expires_at=utcnow() - timedelta(seconds=1))
        )
        session.commit()


def _claim(make: Any, owner: str) -> Any:
    with make() as session:
        row = jobs.claim(session.connection(), owner=owner, lease_seconds=30, now=utcnow())
        session.commit()
        return row


def test_expired_leases_are_retried_with_back_off_then_failed(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    job_id = queue(make, "news", max_attempts=2)
    w = worker(make, retry_seconds=60.0)
    assert _claim(make, "gone-1").attempts == 1
    _expire(make, job_id)
    w.reap_expired()
    reaped = job(make, job_id)
    assert reaped.state == "queued" and reaped.lease_owner is None
    assert reaped.not_before >= utcnow() + timedelta(seconds=50)  # back-off: 60 s
    assert "attempt 1 of 2: the worker gone-1 stopped renewing its lease" in reaped.error
    assert _claim(make, "gone-2") is None  # not before the back-off has passed
    with make() as session:
        session.execute(
            update(jobs.JOBS).where(jobs.JOBS.c.id == job_id).values(not_before=utcnow())
        )
        session.commit()
    assert _claim(make, "gone-2").attempts == 2
    _expire(make, job_id)
    w.reap_expired()
    reaped = job(make, job_id)
    assert reaped.state == "failed" and reaped.finished_at is not None
    assert reaped.error.startswith("gave up after 2 attempts: the worker gone-2 stopped")


def test_back_off_doubles_up_to_a_cap() -> None:
    assert [backoff_seconds(a, 10.0) for a in (1, 2, 3)] == [10.0, 20.0, 40.0]
    assert backoff_seconds(30, 10.0) == 600.0


def test_a_stale_lease_can_neither_renew_nor_finish(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    job_id = queue(make, "news")
    with make() as session:
        conn = session.connection()
        row = jobs.claim(conn, owner="old", lease_seconds=30, now=utcnow())
        session.commit()
    stale = Lease(job_id, "old", int(row.attempts))
    _expire(make, job_id)
    worker(make).reap_expired()
    with make() as session:
        conn = session.connection()
        jobs.claim(conn, owner="new", lease_seconds=30, now=utcnow())
        assert (
            jobs.renew(conn, stale, stage="x", progress=0, lease_seconds=30, now=utcnow()) is None
        )
        assert not jobs.finish(conn, stale, state="succeeded", now=utcnow())
        assert not jobs.set_version(conn, stale, 1)
        session.commit()
    assert job(make, job_id).lease_owner == "new"


def test_cancel_a_queued_build_and_a_finished_one(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    job_id = queue(make, "news")
    with make() as session:
        assert cancel_build(session, "news", job_id)["state"] == "cancelled"
        with pytest.raises(ConflictError, match="already cancelled"):
            cancel_build(session, "news", job_id)
        with pytest.raises(NotFoundError):
            cancel_build(session, "news", job_id + 100)
    assert worker(make).run_once() is None  # nothing left to claim


def test_cancel_a_running_build_at_the_next_stage_boundary(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    job_id = queue(make, "news")
    release = threading.Event()
    compute = FakeCompute(release=release)
    w = worker(make, compute=compute, heartbeat_seconds=0.05)
    runner = threading.Thread(target=w.run_once)
    runner.start()
    assert compute.entered.wait(10)
    with make() as session:
        view = cancel_build(session, "news", job_id)
    assert view["state"] == "running" and view["cancel_requested"]
    wait_for(lambda: job(make, job_id).stage == "fake-vectors")  # heartbeats are running
    release.set()
    runner.join(10)
    row = job(make, job_id)
    assert row.state == "cancelled" and "cancelled on request" in row.error
    assert versions(make) == [] and collection_row(make, "news").active_version_id is None


def test_a_stopping_worker_gives_its_build_back(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    job_id = queue(make, "news")
    release = threading.Event()
    compute = FakeCompute(release=release)
    w = worker(make, compute=compute)
    runner = threading.Thread(target=w.run_once)
    runner.start()
    assert compute.entered.wait(10)
    w.request_stop()  # what SIGTERM does
    release.set()
    runner.join(10)
    row = job(make, job_id)
    assert (row.state, row.attempts, row.lease_owner) == ("queued", 0, None)
    assert "shut down after stage 'fake-vectors'" in row.error
    assert run_until_finished(worker(make), make, job_id).state == "succeeded"


def test_builds_are_listed_newest_first(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    ids = []
    for _ in range(3):
        ids.append(queue(make, "news"))
        with make() as session:
            cancel_build(session, "news", ids[-1])
    with make() as session:
        page = list_builds(session, "news", cursor=None, limit=2)
        rest = list_builds(session, "news", cursor=page["next_cursor"], limit=2)
    assert [b["id"] for b in page["items"]] == ids[::-1][:2]
    assert [b["id"] for b in rest["items"]] == ids[:1] and rest["next_cursor"] is None


def test_a_cancel_asked_of_a_dead_workers_build_is_kept(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    job_id = queue(make, "news")
    _claim(make, "gone")
    with make() as session:
        assert cancel_build(session, "news", job_id)["cancel_requested"]
    _expire(make, job_id)
    worker(make).reap_expired()
    row = job(make, job_id)
    assert row.state == "cancelled" and row.finished_at is not None
    assert worker(make).run_once() is None
