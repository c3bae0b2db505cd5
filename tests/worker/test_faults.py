"""Faults: a worker killed mid-build, two workers on one database, documents changing
during a build, the database going away during a build."""

from __future__ import annotations

import itertools
import os
import signal
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import Engine, event
from sqlalchemy.exc import OperationalError

from service.errors import ConflictError
from service.pipeline.index_content_types import DOC_IDS
from service.pipeline.index_summary import index_summary
from service.storage import index_store
from service.storage.session import make_engine
from tests.build_factories import (
    add_collection,
    array_version_ids,
    collection_row,
    delete,
    factory,
    job,
    queue,
    run_until_finished,
    upsert,
    versions,
    wait_for,
    worker,
)
from tests.fake_compute import FakeCompute

ROOT = Path(__file__).resolve().parents[2]


def _spawn(url: str, marker: Path, *args: str) -> subprocess.Popen[bytes]:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.Popen(
        [sys.executable, "-m", "tests.worker.fake_worker_process", url, str(marker), *args],
        cwd=ROOT,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )


def _wait_marker(proc: subprocess.Popen[bytes], marker: Path) -> None:
    end = time.monotonic() + 60
    while not marker.exists():
        if proc.poll() is not None:
            raise AssertionError(proc.stderr.read().decode()[-3000:])  # type: ignore[union-attr]
        assert time.monotonic() < end, "the worker process never reached the stage"
        time.sleep(0.05)


@pytest.mark.parametrize("stage", ["fake-vectors", "store"])
def test_a_killed_worker_leaves_nothing_visible_and_another_finishes(
    database_url: str, engine: Engine, tmp_path: Path, stage: str
) -> None:
    make = factory(engine)
    add_collection(make, "news", 6)
    job_id = queue(make, "news")
    marker = tmp_path / "marker"
    proc = _spawn(database_url, marker, "--stage", stage, "--lease", "1.5")
    try:
        _wait_marker(proc, marker)
        proc.send_signal(signal.SIGKILL)
        proc.wait(10)
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.stderr.close()  # type: ignore[union-attr]
    killed = job(make, job_id)
    assert (killed.state, killed.lease_owner) == ("running", "doomed")
    if stage == "store":  # part of a version was written, none of it is visible
        assert [v.state for v in versions(make)] == ["building"]
        assert array_version_ids(make)
    assert collection_row(make, "news").active_version_id is None
    with make() as session, pytest.raises(ConflictError, match="no index yet"):
        index_summary(session, "news")
    row = run_until_finished(worker(make), make, job_id)  # after the lease runs out
    assert (row.state, row.attempts) == ("succeeded", 2)
    (published,) = versions(make)  # the orphan was collected
    assert published.state == "published" and array_version_ids(make) == {published.id}


def test_sigterm_finishes_the_stage_and_gives_the_build_back(
    database_url: str, engine: Engine, tmp_path: Path
) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    job_id = queue(make, "news")
    marker = tmp_path / "marker"
    proc = _spawn(database_url, marker, "--sleep", "1.0")
    try:
        _wait_marker(proc, marker)
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(30) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.stderr.close()  # type: ignore[union-attr]
    row = job(make, job_id)
    assert (row.state, row.attempts, row.lease_owner) == ("queued", 0, None)
    assert "shut down after stage 'fake-vectors'" in row.error
    assert versions(make) == []


def test_two_workers_run_each_build_once_never_two_of_a_collection(
    database_url: str, engine: Engine
) -> None:
    make = factory(engine)
    names = ["a", "b", "c"]
    for name in names:
        add_collection(make, name, 4)
    compute = FakeCompute(sleep=0.15)
    engines = [make_engine(database_url) for _ in range(2)]
    workers = [worker(factory(e), compute=compute, poll_seconds=0.02) for e in engines]
    threads = [threading.Thread(target=w.run_forever) for w in workers]
    for t in threads:
        t.start()
    queued: list[int] = []
    try:
        for _ in range(3):  # three builds per collection, queued as fast as allowed
            for name in names:
                queued.append(queue(make, name))
            wait_for(lambda: all(job(make, j).state == "succeeded" for j in queued), 60)
    finally:
        for w in workers:
            w.request_stop()
        for t in threads:
            t.join(10)
        for e in engines:
            e.dispose()
    assert len(set(queued)) == 9
    assert all(job(make, j).attempts == 1 for j in queued)
    assert len(compute.calls) == 9  # each job ran exactly once
    for coll_id in {c for c, _, _ in compute.calls}:
        spans = sorted((t0, t1) for c, t0, t1 in compute.calls if c == coll_id)
        assert all(a[1] <= b[0] for a, b in itertools.pairwise(spans)), spans
    assert all(w.results for w in workers), [len(w.results) for w in workers]
    assert sorted(v.number for v in versions(make)) == [1, 1, 1, 2, 2, 2, 3, 3, 3]


def test_documents_changing_during_a_build(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 6)
    before = sorted(int(i) for i in _doc_ids(make))
    release = threading.Event()
    compute = FakeCompute(release=release)
    w = worker(make, compute=compute)
    job_id = queue(make, "news")
    runner = threading.Thread(target=run_until_finished, args=(w, make, job_id))
    runner.start()
    try:
        assert compute.entered.wait(10)
        upsert(make, "news", [{"id": "new-1", "text": "harbour"}, {"id": "new-2", "text": "vote"}])
        upsert(make, "news", [{"id": "doc-1", "text": "council budget rewritten"}])
        delete(make, "news", "doc-2")
    finally:
        release.set()
        runner.join(20)
    assert job(make, job_id).state == "succeeded"
    with make() as session:
        version = collection_row(make, "news").active_version_id
        stored = index_store.load_arrays(session.connection(), int(version), [DOC_IDS])
        summary = index_summary(session, "news")
    assert stored[DOC_IDS].tolist() == before  # exactly the snapshot
    assert summary["staleness"] == {
        "added": 2,
        "changed": 1,
        "deleted": 1,
        "total": 4,
        "changes_since": 4,
    }
    run_until_finished(worker(make), make, queue(make, "news"))
    with make() as session:
        version = collection_row(make, "news").active_version_id
        stored = index_store.load_arrays(session.connection(), int(version), [DOC_IDS])
        summary = index_summary(session, "news")
    assert stored[DOC_IDS].tolist() == sorted(_doc_ids(make))
    assert summary["staleness"]["total"] == 0 and summary["documents"] == 7


def _doc_ids(make: Any) -> list[int]:
    from sqlalchemy import select

    from service.storage.models import Document

    with make() as session:
        return [int(i) for i in session.execute(select(Document.id)).scalars()]


class Outage:
    """Makes statements of an engine fail as a dropped connection would: the next
    ``statements`` of one thread, or every statement until ``stop``."""

    def __init__(self, engine: Engine) -> None:
        self._lock = threading.Lock()
        self._remaining = 0  # statements still to fail; -1: until stop()
        self._thread: threading.Thread | None = None
        self.failed = 0
        event.listen(engine, "before_cursor_execute", self._check)

    def start(self, statements: int = -1, thread: threading.Thread | None = None) -> None:
        with self._lock:
            self._remaining, self._thread = statements, thread

    def stop(self) -> None:
        with self._lock:
            self._remaining = 0

    def _check(self, *_args: Any) -> None:
        with self._lock:
            if self._remaining == 0:
                return
            if self._thread is not None and threading.current_thread() is not self._thread:
                return
            self._remaining -= 1 if self._remaining > 0 else 0
            self.failed += 1
        raise OperationalError("INSERT ...", {}, Exception("server closed the connection"))


@pytest.fixture
def flaky(database_url: str) -> Iterator[tuple[Engine, Outage]]:
    eng = make_engine(database_url)
    yield eng, Outage(eng)
    eng.dispose()


@pytest.mark.parametrize("long", [False, True], ids=["brief", "longer-than-the-lease"])
def test_the_database_away_during_a_build(
    engine: Engine, flaky: tuple[Engine, Outage], long: bool
) -> None:
    """Brief (the build's next statement fails): the failure is recorded with its reason
    and the build retried. Longer than the lease: not even the failure can be recorded;
    the lease runs out and another round retries it. Either way the worker survives and
    runs the next job too."""
    make = factory(engine)
    add_collection(make, "news", 4)
    add_collection(make, "later", 4)
    flaky_engine, outage = flaky

    def go_down() -> None:  # runs in the build's thread, as the geometry begins
        if long:
            outage.start()
        else:
            outage.start(statements=1, thread=threading.current_thread())

    compute = FakeCompute(on_enter=go_down)
    w = worker(factory(flaky_engine), compute=compute, lease_seconds=1.0, heartbeat_seconds=0.2)
    first, second = queue(make, "news"), queue(make, "later")
    runner = threading.Thread(target=w.run_forever)
    runner.start()
    try:
        assert compute.entered.wait(10)
        if long:
            time.sleep(2.0)
            outage.stop()
        wait_for(lambda: job(make, first).state == "succeeded" == job(make, second).state, 30)
        assert runner.is_alive()
    finally:
        w.request_stop()
        runner.join(10)
    failed = w.results[0]
    assert failed.job_id == first and failed.state == "queued"
    assert "attempt 1 of 3: the database failed during stage 'store'" in failed.error
    assert "server closed the connection" in failed.error
    assert job(make, first).attempts == 2
    assert outage.failed > 3 if long else outage.failed == 1
    assert [v.state for v in versions(make)] == ["published", "published"]
