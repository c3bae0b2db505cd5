"""The lease heartbeat: a thread that renews a running job's lease and reports its stage.

Every ``interval`` seconds one fenced UPDATE extends ``lease_expires_at``, writes the
stage and fraction the build's StageClock last saw (the progress an API client or
``tidemap build --wait`` shows) and reads ``cancel_requested`` back. When the update finds
the job no longer this lease's, the lease is lost: the build stops at its next stage
boundary without touching the job. A failing database is only logged here: if it stays
away longer than the lease, the job is re-queued by another worker and the fence keeps
this one from publishing.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Callable
from datetime import datetime
from types import TracebackType

from sqlalchemy.orm import Session, sessionmaker

from service.pipeline.stage_clock import StageClock
from service.storage import jobs
from service.storage.jobs import Lease
from service.storage.types import utcnow

log = logging.getLogger("tidemap.worker")


class Heartbeat:
    def __init__(
        self,
        factory: sessionmaker[Session],
        lease: Lease,
        clock: StageClock,
        *,
        interval: float,
        lease_seconds: float,
        now: Callable[[], datetime] = utcnow,
    ) -> None:
        self._factory = factory
        self._lease = lease
        self._clock = clock
        self._interval = interval
        self._lease_seconds = lease_seconds
        self._now = now
        self._done = threading.Event()
        self._thread: threading.Thread | None = None
        self.cancel_requested = threading.Event()
        self.lost = threading.Event()
        self.failures = 0

    def beat(self) -> None:
        """Renew once (also called by tests)."""
        try:
            with self._factory() as session:
                answer = jobs.renew(
                    session.connection(),
                    self._lease,
                    stage=self._clock.stage,
                    progress=self._clock.fraction,
                    lease_seconds=self._lease_seconds,
                    now=self._now(),
                )
                session.commit()
        except Exception as exc:  # the database may be away for a while: keep beating
            self.failures += 1
            log.warning("job %s: could not renew the lease: %s", self._lease.job_id, exc)
            return
        if answer is None:
            self.lost.set()
        elif answer:
            self.cancel_requested.set()

    def _run(self) -> None:
        while not self._done.wait(self._interval):
            self.beat()
            if self.lost.is_set():
                return

    def __enter__(self) -> Heartbeat:
        self._thread = threading.Thread(
            target=self._run, name=f"tidemap-heartbeat-{self._lease.job_id}", daemon=True
        )
        self._thread.start()
        return self

    def __exit__(
        self,
        _type: type[BaseException] | None,
        _value: BaseException | None,
        _tb: TracebackType | None,
    ) -> None:
        self._done.set()
        if self._thread is not None:
            # Bounded: a beat stuck on an unreachable database must not hold the worker.
            self._thread.join(timeout=self._interval + 5.0)
