"""The embedded worker of ``tidemap serve``: on with SQLite by default, and it stops cleanly."""

from __future__ import annotations

import threading

import pytest
from sqlalchemy import Engine

from service.worker.embedded import EmbeddedWorker, wants_embedded_worker
from service.worker.worker import WorkerOptions
from tests.build_factories import add_collection, factory, job, queue, wait_for
from tests.fake_compute import FakeCompute


@pytest.mark.parametrize(
    ("setting", "dialect", "expected"),
    [
        ("auto", "sqlite", True),
        ("auto", "postgresql", False),
        ("on", "postgresql", True),
        ("off", "sqlite", False),
    ],
)
def test_when_serve_embeds_a_worker(setting: str, dialect: str, expected: bool) -> None:
    assert wants_embedded_worker(setting, dialect) is expected


def test_unknown_setting_is_refused() -> None:
    with pytest.raises(ValueError, match="auto, on or off"):
        wants_embedded_worker("sometimes", "sqlite")


def test_embedded_worker_builds_and_stops(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    options = WorkerOptions(poll_seconds=0.05, schedule=False)
    embedded = EmbeddedWorker(make, options, compute=FakeCompute()).start()
    try:
        job_id = queue(make, "news")
        wait_for(lambda: job(make, job_id).state == "succeeded")
    finally:
        embedded.stop(timeout=5)
    assert not embedded.alive


def test_a_stop_that_cannot_wait_gives_the_build_back(engine: Engine) -> None:
    make = factory(engine)
    add_collection(make, "news", 4)
    release = threading.Event()
    compute = FakeCompute(release=release)
    embedded = EmbeddedWorker(make, WorkerOptions(poll_seconds=0.05), compute=compute).start()
    job_id = queue(make, "news")
    try:
        assert compute.entered.wait(10)
        embedded.stop(timeout=0.2)  # the stage is still running: the job goes back
        row = job(make, job_id)
        assert (row.state, row.attempts, row.lease_owner) == ("queued", 0, None)
    finally:
        release.set()
        embedded.stop(timeout=10)  # the build thread sees its lease gone and ends
    assert not embedded.alive
    assert job(make, job_id).state == "queued"  # nothing the old thread did came through
