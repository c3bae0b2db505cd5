"""SQL for the job queue: enqueue, claim under a lease, heartbeat, finish, reap.

Claiming
--------
PostgreSQL: ``UPDATE jobs SET state='running', ... WHERE id = (SELECT id FROM jobs WHERE
state='queued' AND not_before has passed ORDER BY id LIMIT 1 FOR UPDATE SKIP LOCKED)
RETURNING ...``: concurrent workers skip each other's locked rows instead of queueing
on them. SQLite: the same statement without the row lock; SQLite runs one writer at a
time, and the outer ``AND state = 'queued'`` makes the update a compare-and-set.

A partial unique index (models.Job, ``uq_jobs_active_build``) allows one queued-or-running
build per collection, so two builds of one collection can never run, however many
workers there are.

Fencing
-------
Every write a worker makes for a claimed job is conditional on ``lease_owner`` and
``attempts`` (the claim's number), and ``state = 'running'``: once a lease has expired and
the job was re-queued or re-claimed, a stalled former owner can no longer renew, finish
or publish it (the publication checks the same fence in its own transaction).

Times are the workers' clocks (UTC); keep them synchronised (NTP) well within the lease.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import Connection, and_, case, or_, select, update

from service.storage.models import Job
from service.storage.types import utcnow

JOBS = Job.__table__
QUEUED, RUNNING, SUCCEEDED, FAILED, CANCELLED = (
    "queued",
    "running",
    "succeeded",
    "failed",
    "cancelled",
)
ACTIVE = (QUEUED, RUNNING)
FINISHED = (SUCCEEDED, FAILED, CANCELLED)
BUILD = "build"


@dataclass(frozen=True)
class Lease:
    """A worker's hold on a running job: the fence of every write it makes for the job."""

    job_id: int
    owner: str
    attempt: int


def _fence(lease: Lease) -> Any:
    return and_(
        JOBS.c.id == lease.job_id,
        JOBS.c.lease_owner == lease.owner,
        JOBS.c.attempts == lease.attempt,
        JOBS.c.state == RUNNING,
    )


def insert_job(
    conn: Connection,
    *,
    collection_id: int,
    trigger: str,
    max_attempts: int,
    now: datetime,
    kind: str = BUILD,
) -> int:
    return int(
        conn.execute(
            JOBS.insert()
            .values(
                kind=kind,
                collection_id=collection_id,
                state=QUEUED,
                progress=0.0,
                attempts=0,
                max_attempts=max_attempts,
                cancel_requested=False,
                timings={},
                statistics={},
                trigger=trigger,
                created_at=now,
            )
            .returning(JOBS.c.id)
        ).scalar_one()
    )


def active_build(conn: Connection, collection_id: int) -> Any:
    return conn.execute(
        select(JOBS).where(
            JOBS.c.collection_id == collection_id,
            JOBS.c.kind == BUILD,
            JOBS.c.state.in_(ACTIVE),
        )
    ).first()


def job_row(conn: Connection, job_id: int, collection_id: int | None = None) -> Any:
    query = select(JOBS).where(JOBS.c.id == job_id)
    if collection_id is not None:
        query = query.where(JOBS.c.collection_id == collection_id)
    return conn.execute(query).first()


def page_jobs(conn: Connection, collection_id: int, before_id: int | None, limit: int) -> list[Any]:
    """Newest first: jobs with an id below ``before_id`` (all when None)."""
    query = select(JOBS).where(JOBS.c.collection_id == collection_id)
    if before_id is not None:
        query = query.where(JOBS.c.id < before_id)
    return list(conn.execute(query.order_by(JOBS.c.id.desc()).limit(limit)))


def claim(conn: Connection, *, owner: str, lease_seconds: float, now: datetime) -> Any:
    """Claim the oldest claimable queued job for ``owner``; the job's row, or None."""
    candidate = (
        select(JOBS.c.id)
        .where(
            JOBS.c.state == QUEUED,
            or_(JOBS.c.not_before.is_(None), JOBS.c.not_before <= now),
        )
        .order_by(JOBS.c.id)
        .limit(1)
    )
    if conn.dialect.name == "postgresql":
        candidate = candidate.with_for_update(skip_locked=True)
    return conn.execute(
        update(JOBS)
        .where(JOBS.c.id == candidate.scalar_subquery(), JOBS.c.state == QUEUED)
        .values(
            state=RUNNING,
            lease_owner=owner,
            lease_expires_at=now + timedelta(seconds=lease_seconds),
            attempts=JOBS.c.attempts + 1,
            started_at=now,
            stage=None,
            progress=0.0,
            cancel_requested=False,
            not_before=None,
        )
        .returning(*JOBS.c)
    ).first()


def renew(
    conn: Connection,
    lease: Lease,
    *,
    stage: str | None,
    progress: float,
    lease_seconds: float,
    now: datetime,
) -> bool | None:
    """Extend the lease and record the stage; return whether a cancel was requested, or
    None when the job is no longer this lease's."""
    row = conn.execute(
        update(JOBS)
        .where(_fence(lease))
        .values(
            lease_expires_at=now + timedelta(seconds=lease_seconds),
            stage=stage,
            progress=progress,
        )
        .returning(JOBS.c.cancel_requested)
    ).first()
    return None if row is None else bool(row.cancel_requested)


def set_version(conn: Connection, lease: Lease, version_id: int) -> bool:
    """Point the running job at the version it is writing (fenced)."""
    done = conn.execute(update(JOBS).where(_fence(lease)).values(version_id=version_id))
    return done.rowcount == 1


def finish(
    conn: Connection,
    lease: Lease,
    *,
    state: str,
    now: datetime,
    error: str | None = None,
    timings: dict[str, float] | None = None,
    statistics: dict[str, Any] | None = None,
    version_id: int | None = None,
    stage: str | None = None,
    unless_cancel_requested: bool = False,
) -> bool:
    """End the job in ``state`` (fenced); False when it was not this lease's any more
    (or, with ``unless_cancel_requested``, when a cancel is pending)."""
    if state not in FINISHED:
        raise ValueError(f"finish needs one of {FINISHED}, got {state!r}")
    condition = _fence(lease)
    if unless_cancel_requested:
        condition = and_(condition, JOBS.c.cancel_requested.is_(False))
    values: dict[str, Any] = {
        "state": state,
        "finished_at": now,
        "error": error,
        "lease_owner": None,
        "lease_expires_at": None,
    }
    if state == SUCCEEDED:
        values["progress"] = 1.0
    if timings is not None:
        values["timings"] = timings
    if statistics is not None:
        values["statistics"] = statistics
    if version_id is not None:
        values["version_id"] = version_id
    if stage is not None:
        values["stage"] = stage
    return conn.execute(update(JOBS).where(condition).values(**values)).rowcount == 1


def _queued_unless_cancelled(now: datetime) -> dict[str, Any]:
    """Back to the queue, or cancelled if a cancel was asked for while it ran (the claim
    of a queued job would otherwise forget the request)."""
    return {
        "state": case((JOBS.c.cancel_requested.is_(True), CANCELLED), else_=QUEUED),
        "finished_at": case((JOBS.c.cancel_requested.is_(True), now), else_=None),
    }


def requeue(
    conn: Connection,
    lease: Lease,
    *,
    not_before: datetime | None,
    error: str | None,
    count_attempt: bool,
    timings: dict[str, float] | None = None,
    stage: str | None = None,
) -> bool:
    """Put the job back in the queue (fenced). Without ``count_attempt`` (a worker shutting
    down cleanly) the attempt is given back."""
    values: dict[str, Any] = _queued_unless_cancelled(utcnow()) | {
        "lease_owner": None,
        "lease_expires_at": None,
        "not_before": not_before,
        "error": error,
        "version_id": None,
    }
    if not count_attempt:
        values["attempts"] = JOBS.c.attempts - 1
    if timings is not None:
        values["timings"] = timings
    if stage is not None:
        values["stage"] = stage
    return conn.execute(update(JOBS).where(_fence(lease)).values(**values)).rowcount == 1


def expired(conn: Connection, now: datetime) -> list[Any]:
    return list(
        conn.execute(select(JOBS).where(JOBS.c.state == RUNNING, JOBS.c.lease_expires_at < now))
    )


def reap(
    conn: Connection, row: Any, *, now: datetime, not_before: datetime | None, error: str
) -> bool:
    """Re-queue (``not_before`` given) or fail (None) one job whose lease ran out, if it
    is still in the state ``row`` saw (another worker may have reaped it first)."""
    lease = Lease(int(row.id), str(row.lease_owner), int(row.attempts))
    condition = and_(_fence(lease), JOBS.c.lease_expires_at < now)
    values: dict[str, Any] = {
        "lease_owner": None,
        "lease_expires_at": None,
        "error": error,
        "version_id": None,
    }
    if not_before is None:
        values |= {"state": FAILED, "finished_at": now}
    else:
        values |= _queued_unless_cancelled(now) | {"not_before": not_before}
    return conn.execute(update(JOBS).where(condition).values(**values)).rowcount == 1


def cancel_queued(conn: Connection, job_id: int, now: datetime, collection_id: Any) -> bool:
    """Cancel the job if it is queued (``collection_id``: a value or a scalar subquery)."""
    done = conn.execute(
        update(JOBS)
        .where(JOBS.c.id == job_id, JOBS.c.collection_id == collection_id, JOBS.c.state == QUEUED)
        .values(state=CANCELLED, finished_at=now, error="cancelled before it started")
    )
    return done.rowcount == 1


def request_cancel(conn: Connection, job_id: int, collection_id: Any) -> bool:
    """Ask a running job to stop at its next stage boundary."""
    done = conn.execute(
        update(JOBS)
        .where(JOBS.c.id == job_id, JOBS.c.collection_id == collection_id, JOBS.c.state == RUNNING)
        .values(cancel_requested=True)
    )
    return done.rowcount == 1
