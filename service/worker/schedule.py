"""The re-index schedule: queue a build for every collection whose policy says it is due
(settings.reindex: every N seconds and/or after M changed documents).

The decision is kept in the database (collections.last_build_at and
last_build_change_count, and the active-job check), taken under the collection's row lock
in one transaction (service.pipeline.builds.enqueue_if_due): any number of workers can run
the schedule at once and a due collection still gets one build.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy.orm import Session, sessionmaker

from service.pipeline.builds import enqueue_if_due, scheduled_collections


def run_schedule(factory: sessionmaker[Session], *, now: datetime, max_attempts: int) -> list[int]:
    """Queue the due builds; the new jobs' ids."""
    with factory() as session:
        candidates = scheduled_collections(session, now=now)
    queued = []
    for collection_id in candidates:
        with factory() as session:
            job_id = enqueue_if_due(session, collection_id, now=now, max_attempts=max_attempts)
        if job_id is not None:
            queued.append(job_id)
    return queued
