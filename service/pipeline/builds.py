"""Use cases for index builds as jobs: queue one, list, read, cancel, and the schedule's
"queue one if due". The build itself is service.pipeline.build_run."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from service.errors import ConflictError, NotFoundError
from service.pipeline.collection_settings import CollectionSettings
from service.pipeline.collections import check_name
from service.pipeline.documents import decode_cursor, encode_cursor
from service.pipeline.formatting import iso
from service.storage import jobs
from service.storage import repository as repo
from service.storage.models import Collection, IndexVersion
from service.storage.types import utcnow

COLLECTIONS = Collection.__table__
VERSIONS = IndexVersion.__table__
TRIGGERS = ("api", "cli", "schedule")


def job_view(row: Any, collection: str, version_number: int | None = None) -> dict[str, Any]:
    """A job as the API and the CLI show it."""
    return {
        "id": int(row.id),
        "collection": collection,
        "kind": row.kind,
        "state": row.state,
        "stage": row.stage,
        "progress": float(row.progress),
        "attempts": int(row.attempts),
        "max_attempts": int(row.max_attempts),
        "trigger": row.trigger,
        "cancel_requested": bool(row.cancel_requested),
        "error": row.error,
        "timings": dict(row.timings or {}),
        "statistics": dict(row.statistics or {}),
        "version": version_number,
        "lease": (
            {"owner": row.lease_owner, "expires_at": iso(row.lease_expires_at)}
            if row.lease_owner
            else None
        ),
        "retry_after": iso(row.not_before) if row.state == jobs.QUEUED else None,
        "created_at": iso(row.created_at),
        "started_at": iso(row.started_at),
        "finished_at": iso(row.finished_at),
    }


def _numbers(session: Session, rows: list[Any]) -> dict[int, int | None]:
    ids = [int(r.version_id) for r in rows if r.version_id is not None]
    if not ids:
        return {}
    found = session.execute(
        select(VERSIONS.c.id, VERSIONS.c.number).where(VERSIONS.c.id.in_(ids))
    ).all()
    return {int(i): n for i, n in found}


def _views(session: Session, rows: list[Any], collection: str) -> list[dict[str, Any]]:
    numbers = _numbers(session, rows)
    return [job_view(r, collection, numbers.get(int(r.version_id or 0))) for r in rows]


@dataclass(frozen=True)
class Enqueued:
    job: dict[str, Any]
    existing: bool  # True: a build was already queued or running; this is that one


def _mark_queued(session: Session, coll_id: int, now: datetime) -> None:
    """Reset the schedule's clock and change baseline: a build has been asked for."""
    session.execute(
        update(COLLECTIONS)
        .where(COLLECTIONS.c.id == coll_id)
        .values(last_build_at=now, last_build_change_count=COLLECTIONS.c.change_count)
    )


def _no_collection(collection: str) -> NotFoundError:
    return NotFoundError(f"collection {collection!r} does not exist", {"collection": collection})


def enqueue_build(
    session: Session, collection: str, *, trigger: str, max_attempts: int
) -> Enqueued:
    """Queue a build of the collection, or return the one already queued or running.

    The collection row is locked first (a write, as every write use case starts), so
    concurrent requests for one collection are serialised and only one job is created;
    the partial unique index on jobs would refuse a second one anyway.
    """
    if trigger not in TRIGGERS:
        raise ValueError(f"trigger must be one of {TRIGGERS}, got {trigger!r}")
    check_name(collection)
    conn = session.connection()
    held = repo.hold_collection(conn, name=collection)
    if held is None:
        session.rollback()
        raise _no_collection(collection)
    current = jobs.active_build(conn, int(held.id))
    if current is not None:
        session.commit()
        return Enqueued(job_view(current, collection), existing=True)
    now = utcnow()
    job_id = jobs.insert_job(
        conn, collection_id=int(held.id), trigger=trigger, max_attempts=max_attempts, now=now
    )
    _mark_queued(session, int(held.id), now)
    row = jobs.job_row(conn, job_id)
    session.commit()
    return Enqueued(job_view(row, collection), existing=False)


def reindex_due(
    settings: CollectionSettings,
    *,
    changes: int,
    last_build_at: datetime | None,
    created_at: datetime,
    now: datetime,
) -> str | None:
    """Why the schedule would rebuild now ("after_changes" / "every_seconds"), or None.

    Nothing is due without a change since the last build: rebuilding the same documents
    with the same settings and seed gives the same index.
    """
    policy = settings.reindex
    if changes <= 0:
        return None
    if policy.after_changes is not None and changes >= policy.after_changes:
        return "after_changes"
    since = last_build_at or created_at
    if policy.every_seconds is not None and (now - since).total_seconds() >= policy.every_seconds:
        return "every_seconds"
    return None


def enqueue_if_due(
    session: Session, collection_id: int, *, now: datetime, max_attempts: int
) -> int | None:
    """Queue a scheduled build when the collection's re-index policy says so; the job id.

    Decided under the collection's row lock, with the active-job check in the same
    transaction: several workers running the schedule at once queue one build at most.
    """
    conn = session.connection()
    held = repo.hold_collection(conn, coll_id=collection_id)
    if held is None:
        session.rollback()
        return None
    why = reindex_due(
        CollectionSettings.model_validate(held.settings),
        changes=int(held.change_count) - int(held.last_build_change_count),
        last_build_at=held.last_build_at,
        created_at=held.created_at,
        now=now,
    )
    if why is None or jobs.active_build(conn, collection_id) is not None:
        session.rollback()
        return None
    job_id = jobs.insert_job(
        conn, collection_id=collection_id, trigger="schedule", max_attempts=max_attempts, now=now
    )
    _mark_queued(session, collection_id, now)
    session.commit()
    return job_id


def scheduled_collections(session: Session, *, now: datetime) -> list[int]:
    """Ids of the collections that look due, from one unlocked read (cheap: no lock is
    taken for the others; ``enqueue_if_due`` decides again under the lock)."""
    active = select(jobs.JOBS.c.collection_id).where(
        jobs.JOBS.c.kind == jobs.BUILD, jobs.JOBS.c.state.in_(jobs.ACTIVE)
    )
    rows = session.execute(
        select(
            COLLECTIONS.c.id,
            COLLECTIONS.c.settings,
            COLLECTIONS.c.change_count,
            COLLECTIONS.c.last_build_change_count,
            COLLECTIONS.c.last_build_at,
            COLLECTIONS.c.created_at,
        ).where(COLLECTIONS.c.id.not_in(active))
    ).all()
    session.rollback()
    due = []
    for row in rows:
        settings = CollectionSettings.model_validate(row.settings)
        why = reindex_due(
            settings,
            changes=int(row.change_count) - int(row.last_build_change_count),
            last_build_at=row.last_build_at,
            created_at=row.created_at,
            now=now,
        )
        if why is not None:
            due.append(int(row.id))
    return due


def list_builds(
    session: Session, collection: str, *, cursor: str | None, limit: int
) -> dict[str, Any]:
    """Builds newest first, a page at a time (``next_cursor`` continues with older ones)."""
    before = decode_cursor(cursor) if cursor else None
    conn = session.connection()
    coll_id = repo.collection_id(conn, check_name(collection))
    rows = jobs.page_jobs(conn, coll_id, before, limit + 1)
    more = len(rows) > limit
    rows = rows[:limit]
    return {
        "items": _views(session, rows, collection),
        "next_cursor": encode_cursor(int(rows[-1].id)) if more and rows else None,
    }


def _job(session: Session, collection: str, build_id: int) -> tuple[int, Any]:
    conn = session.connection()
    coll_id = repo.collection_id(conn, check_name(collection))
    row = jobs.job_row(conn, build_id, coll_id)
    if row is None:
        raise NotFoundError(
            f"build {build_id} is not a build of collection {collection!r}",
            {"collection": collection, "build": build_id},
        )
    return coll_id, row


def get_build(session: Session, collection: str, build_id: int) -> dict[str, Any]:
    _, row = _job(session, collection, build_id)
    return _views(session, [row], collection)[0]


def cancel_build(session: Session, collection: str, build_id: int) -> dict[str, Any]:
    """Cancel a queued build at once, or ask a running one to stop at its next stage
    boundary (``cancel_requested``); a finished build cannot be cancelled (409)."""
    check_name(collection)
    conn = session.connection()
    # The writes come first, each one conditional statement (SQLite: a transaction that
    # read first may not write once another writer has committed).
    now = utcnow()
    owner = select(COLLECTIONS.c.id).where(COLLECTIONS.c.name == collection).scalar_subquery()
    if jobs.cancel_queued(conn, build_id, now, owner) or jobs.request_cancel(conn, build_id, owner):
        session.commit()
        return get_build(session, collection, build_id)
    _, row = _job(session, collection, build_id)  # 404 for an unknown collection or build
    session.rollback()
    raise ConflictError(
        f"build {build_id} has already {row.state}; only a queued or running build can be "
        "cancelled",
        {"build": build_id, "state": row.state},
    )
