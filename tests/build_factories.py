"""Builders for the tests of index builds, jobs and workers."""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

from sqlalchemy import Engine, select
from sqlalchemy.orm import Session, sessionmaker

from service.pipeline.builds import enqueue_build
from service.pipeline.collections import create_collection
from service.pipeline.documents import delete_document, upsert_batch
from service.pipeline.index_content_types import ComputeFn
from service.storage.models import Collection, IndexArray, IndexVersion, Job
from service.storage.session import make_session_factory
from service.worker.worker import Worker, WorkerOptions
from tests.fake_compute import fake_compute_index

TOPICS = (
    "harbour tide mooring boats pier",
    "council budget election mayor vote",
    "theatre concert gallery painter stage",
)


def doc(i: int, text: str | None = None) -> dict[str, Any]:
    body = text or f"{TOPICS[i % 3]} report{i} weekly{i % 5} notes"
    return {"id": f"doc-{i}", "title": f"Item {i}", "text": body}


def factory(engine: Engine) -> sessionmaker[Session]:
    return make_session_factory(engine)


def add_collection(
    make: sessionmaker[Session], name: str, n_docs: int, settings: dict[str, Any] | None = None
) -> None:
    with make() as session:
        create_collection(session, name, settings)
        if n_docs:
            upsert(make, name, [doc(i) for i in range(n_docs)])


def upsert(make: sessionmaker[Session], name: str, docs: list[dict[str, Any]]) -> None:
    with make() as session:
        upsert_batch(session, name, enumerate(docs), max_text_bytes=100_000, chunk_size=50)


def delete(make: sessionmaker[Session], name: str, external_id: str) -> None:
    with make() as session:
        delete_document(session, name, external_id)


def queue(make: sessionmaker[Session], name: str, max_attempts: int = 3) -> int:
    with make() as session:
        return int(enqueue_build(session, name, trigger="api", max_attempts=max_attempts).job["id"])


def worker(
    make: sessionmaker[Session], compute: ComputeFn = fake_compute_index, **options: Any
) -> Worker:
    defaults: dict[str, Any] = {
        "lease_seconds": 30.0,
        "poll_seconds": 0.05,
        "retry_seconds": 0.0,
        "keep_versions": 3,
    }
    return Worker(make, WorkerOptions(**(defaults | options)), compute=compute)


def job(make: sessionmaker[Session], job_id: int) -> Any:
    with make() as session:
        return session.execute(select(Job.__table__).where(Job.id == job_id)).first()


def collection_row(make: sessionmaker[Session], name: str) -> Any:
    with make() as session:
        table = Collection.__table__
        return session.execute(select(table).where(table.c.name == name)).first()


def versions(make: sessionmaker[Session]) -> list[Any]:
    with make() as session:
        table = IndexVersion.__table__
        return list(session.execute(select(table).order_by(table.c.id)))


def array_version_ids(make: sessionmaker[Session]) -> set[int]:
    with make() as session:
        return set(session.execute(select(IndexArray.version_id).distinct()).scalars())


def wait_for(predicate: Callable[[], bool], timeout: float = 20.0, step: float = 0.05) -> None:
    end = time.monotonic() + timeout
    while not predicate():
        if time.monotonic() > end:
            raise AssertionError(f"gave up waiting after {timeout} s")
        time.sleep(step)


def run_until_finished(
    w: Worker, make: sessionmaker[Session], job_id: int, rounds: int = 400
) -> Any:
    """Run worker rounds until the job has finished; its row."""
    for _ in range(rounds):
        row = job(make, job_id)
        if row.state in ("succeeded", "failed", "cancelled"):
            return row
        if w.run_once() is None:
            time.sleep(w.options.poll_seconds)
    raise AssertionError(f"job {job_id} did not finish: {job(make, job_id)}")
