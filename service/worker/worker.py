"""The build worker: housekeeping, claiming, running and recording jobs.

One loop iteration (``run_once``):

1. housekeeping: re-queue (with back-off) or fail the jobs whose lease ran out, queue the
   builds the re-index schedule says are due, delete versions orphaned by dead builds;
2. claim the oldest claimable queued job (service.storage.jobs.claim) under a lease;
3. run it (service.pipeline.build_run.run_build) with a heartbeat thread renewing the
   lease, and record the outcome: succeeded (done by the publication itself), failed
   with a readable reason, cancelled, or back in the queue (a database failure worth a
   retry, or this worker shutting down).

Nothing in the loop lets a database error escape: a worker survives an unreachable
database and carries on with the next job when it is back.
"""

from __future__ import annotations

import logging
import os
import secrets
import socket
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy.exc import DBAPIError, IntegrityError
from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.errors import BuildFailedError, TidemapError
from service.pipeline.build_run import collect_garbage, jsonable, run_build
from service.pipeline.index_content_types import (
    BuildCancelled,
    BuildInterrupted,
    ComputeFn,
    LeaseLost,
)
from service.pipeline.stage_clock import StageClock
from service.storage import jobs
from service.storage.jobs import Lease
from service.storage.types import utcnow
from service.worker.heartbeat import Heartbeat
from service.worker.schedule import run_schedule

log = logging.getLogger("tidemap.worker")
MAX_BACKOFF_SECONDS = 600.0
RECORD_TRIES = 3


@dataclass(frozen=True)
class WorkerOptions:
    lease_seconds: float = 60.0
    poll_seconds: float = 2.0
    heartbeat_seconds: float | None = None  # default: a third of the lease, at most 2 s
    keep_versions: int = 3
    max_attempts: int = 3  # of the builds the schedule queues
    retry_seconds: float = 10.0  # back-off before the first retry, doubled per attempt
    schedule: bool = True

    @classmethod
    def from_settings(cls, settings: Settings, **overrides: Any) -> WorkerOptions:
        values: dict[str, Any] = {
            "lease_seconds": settings.worker_lease_seconds,
            "poll_seconds": settings.worker_poll_seconds,
            "keep_versions": settings.keep_versions,
            "max_attempts": settings.build_max_attempts,
            "retry_seconds": settings.build_retry_seconds,
        }
        return cls(**(values | overrides))

    @property
    def heartbeat(self) -> float:
        if self.heartbeat_seconds is not None:
            return self.heartbeat_seconds
        return min(self.lease_seconds / 3.0, 2.0)


def backoff_seconds(attempt: int, base: float) -> float:
    """Wait before retrying after failed attempt ``attempt`` (1, 2, ...): base * 2^(a-1)."""
    return float(min(MAX_BACKOFF_SECONDS, base * 2.0 ** max(0, attempt - 1)))


@dataclass(frozen=True)
class JobResult:
    job_id: int
    collection_id: int
    state: str  # succeeded, failed, cancelled, queued (retry / shutdown) or lost
    error: str | None = None
    version: int | None = None
    timings: dict[str, float] = field(default_factory=dict)


def _short(exc: BaseException) -> str:
    orig = getattr(exc, "orig", None)
    text = str(orig if orig is not None else exc).strip().splitlines()
    return (text[0] if text else type(exc).__name__)[:300]


def default_owner() -> str:
    return f"{socket.gethostname()[:80]}:{os.getpid()}:{secrets.token_hex(3)}"


class Worker:
    """Claims and runs jobs; thread-safe to stop (``request_stop``) from another thread."""

    def __init__(
        self,
        factory: sessionmaker[Session],
        options: WorkerOptions | None = None,
        *,
        compute: ComputeFn | None = None,
        owner: str | None = None,
        now: Callable[[], datetime] = utcnow,
    ) -> None:
        self.factory = factory
        self.options = options or WorkerOptions()
        self.compute = compute
        self.owner = owner or default_owner()
        self._now = now
        self._stop = threading.Event()
        self._current: Lease | None = None
        self._clock: StageClock | None = None
        self.results: list[JobResult] = []

    # --- control ---------------------------------------------------------------------

    def request_stop(self) -> None:
        """Stop after the current stage (the job goes back to the queue) or, when idle, now."""
        self._stop.set()

    @property
    def stopping(self) -> bool:
        return self._stop.is_set()

    def abandon(self) -> bool:
        """Give the current job back to the queue at once (a second SIGTERM, a shutdown
        that cannot wait); True if a job was given back."""
        lease, clock = self._current, self._clock
        if lease is None:
            return False
        stage = clock.stage if clock is not None else None
        return self._record(
            lambda conn: jobs.requeue(
                conn,
                lease,
                not_before=None,
                error=f"the worker {self.owner} stopped during stage {stage!r}; re-queued",
                count_attempt=False,
            )
        )

    # --- the loop --------------------------------------------------------------------

    def run_forever(self) -> None:
        log.info("worker %s started", self.owner)
        while not self._stop.is_set():
            try:
                result = self.run_once()
            except Exception:  # never let the loop die; the database may come back
                log.exception("worker %s: unexpected error in the loop", self.owner)
                result = None
            if result is None:
                self._stop.wait(self.options.poll_seconds)
        log.info("worker %s stopped", self.owner)

    def run_once(self) -> JobResult | None:
        """Housekeeping, then claim and run one job; the result, or None when idle."""
        self.housekeeping()
        if self._stop.is_set():
            return None
        row = self.claim()
        if row is None:
            return None
        result = self.run_job(row)
        self.results.append(result)
        return result

    def housekeeping(self) -> None:
        for step in (self.reap_expired, self.schedule, self.collect_garbage):
            try:
                step()
            except DBAPIError as exc:
                log.warning("worker %s: %s failed: %s", self.owner, step.__name__, _short(exc))

    def claim(self) -> Any:
        try:
            with self.factory() as session:
                row = jobs.claim(
                    session.connection(),
                    owner=self.owner,
                    lease_seconds=self.options.lease_seconds,
                    now=self._now(),
                )
                session.commit()
                return row
        except DBAPIError as exc:
            log.warning("worker %s: could not claim a job: %s", self.owner, _short(exc))
            return None

    def schedule(self) -> None:
        if self.options.schedule:
            for job_id in run_schedule(
                self.factory, now=self._now(), max_attempts=self.options.max_attempts
            ):
                log.info("worker %s: the schedule queued build %s", self.owner, job_id)

    def collect_garbage(self) -> None:
        for version_id in collect_garbage(self.factory):
            log.info("worker %s: deleted orphaned version %s", self.owner, version_id)

    def reap_expired(self) -> None:
        """Re-queue with back-off, or fail after max_attempts, every job whose lease ran out."""
        now = self._now()
        with self.factory() as session:
            rows = jobs.expired(session.connection(), now)
            session.rollback()
            for row in rows:
                who = f"the worker {row.lease_owner} stopped renewing its lease during stage "
                who += f"{row.stage!r} (killed, stalled or cut off from the database)"
                if row.attempts >= row.max_attempts:
                    error, not_before = f"gave up after {row.attempts} attempts: {who}", None
                else:
                    wait = backoff_seconds(int(row.attempts), self.options.retry_seconds)
                    not_before = now + timedelta(seconds=wait)
                    error = f"attempt {row.attempts} of {row.max_attempts}: {who}; retrying"
                if jobs.reap(
                    session.connection(), row, now=now, not_before=not_before, error=error
                ):
                    log.warning("worker %s: job %s: %s", self.owner, row.id, error)
                session.commit()

    # --- one job ---------------------------------------------------------------------

    def run_job(self, row: Any) -> JobResult:
        lease = Lease(int(row.id), self.owner, int(row.attempts))
        collection_id = int(row.collection_id)
        opts = self.options
        log.info(
            "worker %s: build %s (attempt %s) started", self.owner, lease.job_id, lease.attempt
        )
        clock: StageClock
        heartbeat = None

        def at_boundary(_next: str) -> None:
            assert heartbeat is not None
            if heartbeat.lost.is_set():
                raise LeaseLost(f"job {lease.job_id} is no longer this worker's")
            if heartbeat.cancel_requested.is_set():
                raise BuildCancelled(f"cancelled on request after stage {clock.stage!r}")
            if self._stop.is_set():
                raise BuildInterrupted(f"the worker stopped after stage {clock.stage!r}")

        clock = StageClock(at_boundary)
        self._current, self._clock = lease, clock
        heartbeat = Heartbeat(
            self.factory, lease, clock, interval=opts.heartbeat, lease_seconds=opts.lease_seconds
        )
        try:
            with heartbeat:
                outcome = run_build(
                    self.factory,
                    lease,
                    collection_id,
                    clock,
                    compute=self.compute,
                    keep_versions=opts.keep_versions,
                )
            log.info(
                "worker %s: build %s published version %s", self.owner, lease.job_id, outcome.number
            )
            return JobResult(
                lease.job_id, collection_id, jobs.SUCCEEDED, None, outcome.number, outcome.timings
            )
        except BaseException as exc:
            return self._failed(lease, collection_id, clock, row, exc)
        finally:
            self._current = self._clock = None

    def _failed(
        self, lease: Lease, collection_id: int, clock: StageClock, row: Any, exc: BaseException
    ) -> JobResult:
        stage, timings, now = clock.stage, clock.timings(), self._now()

        def result(state: str, error: str | None) -> JobResult:
            return JobResult(lease.job_id, collection_id, state, error, None, timings)

        if isinstance(exc, LeaseLost):
            log.warning("worker %s: build %s: %s", self.owner, lease.job_id, exc)
            return result("lost", str(exc))
        if isinstance(exc, BuildInterrupted):
            error = f"the worker {self.owner} shut down after stage {stage!r}; re-queued"
            self._record(
                lambda c: jobs.requeue(
                    c,
                    lease,
                    not_before=None,
                    error=error,
                    count_attempt=False,
                    timings=timings,
                    stage=stage,
                )
            )
            return result(jobs.QUEUED, error)
        if isinstance(exc, BuildCancelled):
            error = str(exc) or "cancelled on request"
            self._record(
                lambda c: jobs.finish(
                    c,
                    lease,
                    state=jobs.CANCELLED,
                    now=now,
                    error=error,
                    timings=timings,
                    stage=stage,
                )
            )
            return result(jobs.CANCELLED, error)
        transient = isinstance(exc, DBAPIError) and not isinstance(exc, IntegrityError)
        if transient and lease.attempt < int(row.max_attempts):
            wait = backoff_seconds(lease.attempt, self.options.retry_seconds)
            error = (
                f"attempt {lease.attempt} of {row.max_attempts}: the database failed during "
                f"stage {stage!r} ({_short(exc)}); retrying in {wait:g} s"
            )
            log.warning("worker %s: build %s: %s", self.owner, lease.job_id, error)
            not_before = now + timedelta(seconds=wait)
            self._record(
                lambda c: jobs.requeue(
                    c,
                    lease,
                    not_before=not_before,
                    error=error,
                    count_attempt=True,
                    timings=timings,
                    stage=stage,
                )
            )
            return result(jobs.QUEUED, error)
        statistics: dict[str, Any] | None = None
        if transient:
            error = (
                f"gave up after {lease.attempt} attempts: the database failed during stage "
                f"{stage!r} ({_short(exc)})"
            )
        elif isinstance(exc, BuildFailedError):
            error = exc.message
            statistics = {"failure": jsonable(exc.details)} if exc.details is not None else None
        elif isinstance(exc, TidemapError):
            error = f"{exc.message} (during stage {stage!r})"
        elif isinstance(exc, Exception):
            log.error("worker %s: build %s failed", self.owner, lease.job_id, exc_info=exc)
            error = (
                f"internal error during stage {stage!r}: {type(exc).__name__}: {_short(exc)} "
                "(the worker's log has the traceback)"
            )
        else:  # KeyboardInterrupt, SystemExit: give the job back, then let it propagate
            self.abandon_lease(lease, stage)
            raise exc
        log.warning("worker %s: build %s failed: %s", self.owner, lease.job_id, error)
        self._record(
            lambda c: jobs.finish(
                c,
                lease,
                state=jobs.FAILED,
                now=now,
                error=error,
                timings=timings,
                statistics=statistics,
                stage=stage,
            )
        )
        return result(jobs.FAILED, error)

    def abandon_lease(self, lease: Lease, stage: str | None) -> None:
        self._record(
            lambda c: jobs.requeue(
                c,
                lease,
                not_before=None,
                error=f"the worker {self.owner} stopped during stage {stage!r}; re-queued",
                count_attempt=False,
            )
        )

    def _record(self, write: Callable[[Any], bool]) -> bool:
        """Run one fenced write, retrying a failing database a few times; False when the
        job was not this worker's any more or the database stayed away (the lease then
        runs out and another worker's housekeeping records the outcome)."""
        for attempt in range(RECORD_TRIES):
            try:
                with self.factory() as session:
                    done = write(session.connection())
                    session.commit()
                    return done
            except DBAPIError as exc:
                log.warning(
                    "worker %s: could not record a job outcome: %s", self.owner, _short(exc)
                )
                if attempt + 1 < RECORD_TRIES:
                    time.sleep(min(1.0, self.options.poll_seconds))
        return False
