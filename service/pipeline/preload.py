"""Loading the active index of every collection when an API process starts.

Without it the first query of each collection after a start or a deploy loads the
version itself (1.5 s at 100,000 documents on this machine, during which every request
of that collection waits). Loaded at start-up, before the process takes connections, a
worker of a pool joins only once it can answer at full speed; the others meanwhile take
the connections (service.api.balanced_accept).
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field

from sqlalchemy import Engine, select

from service.pipeline.live_index import LiveIndex
from service.storage.models import Collection

COLLECTIONS = Collection.__table__

__all__ = ["PreloadReport", "preload_active_indexes"]

log = logging.getLogger(__name__)


@dataclass
class PreloadReport:
    loaded: list[str] = field(default_factory=list)
    failed: dict[str, str] = field(default_factory=dict)  # collection -> reason
    seconds: float = 0.0


def preload_active_indexes(engine: Engine, live_index: LiveIndex) -> PreloadReport:
    """Load the live index of each collection that has an active version. A collection
    that fails (deleted meanwhile, an unreadable version) is reported and skipped: its
    first query then answers the error the usual way."""
    started = time.perf_counter()
    report = PreloadReport()
    try:
        with engine.connect() as conn:
            names = list(
                conn.execute(
                    select(COLLECTIONS.c.name)
                    .where(COLLECTIONS.c.active_version_id.is_not(None))
                    .order_by(COLLECTIONS.c.name)
                ).scalars()
            )
    except Exception as exc:  # a start-up must not fail on it: /readyz reports the database
        report.failed["*"] = f"{type(exc).__name__}: {exc}"
        log.warning("no index preloaded: the collections could not be listed: %s", exc)
        return report
    for name in names:
        try:
            live_index.get(name)
        except Exception as exc:  # the first query of it answers the error properly
            report.failed[name] = f"{type(exc).__name__}: {exc}"
            log.warning("index of collection %r not preloaded: %s", name, exc)
        else:
            report.loaded.append(name)
    report.seconds = time.perf_counter() - started
    if names:
        log.info(
            "preloaded %d of %d active indexes in %.2f s",
            len(report.loaded),
            len(names),
            report.seconds,
        )
    return report
