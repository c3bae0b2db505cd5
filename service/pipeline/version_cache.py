"""Index versions held in an API process's memory, swapped when a newer one is published.

``VersionCache.get(collection)`` answers from memory; at most every ``check_seconds`` per
collection it runs one cheap SELECT of collections.active_version_id, and only when that
changed does it load the new version's arrays (every chunk in one query) and swap the
reference. A query keeps the LoadedVersion it started with: its arrays are read-only numpy
arrays over bytes the process owns, so neither the swap nor the retention that deletes an
old version's rows from the database (service.pipeline.build_run.apply_retention) can
change them under it; the old version is freed when its last query drops it.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from service.errors import ConflictError, NotFoundError
from service.pipeline.index_content_types import GroupRecord
from service.storage import index_store
from service.storage.models import Collection

COLLECTIONS = Collection.__table__


@dataclass(frozen=True)
class LoadedVersion:
    collection_id: int
    collection: str
    version_id: int
    number: int
    published_at: datetime | None
    arrays: Mapping[str, np.ndarray]  # read-only
    groups: tuple[GroupRecord, ...]
    statistics: dict[str, Any]
    parameters: dict[str, Any]
    load_seconds: float


def load_version(session: Session, version_id: int, collection: str) -> LoadedVersion:
    """Read one version's row, arrays and groups."""
    started = time.perf_counter()
    conn = session.connection()
    row = index_store.version_row(conn, version_id)
    if row is None:
        raise NotFoundError(f"index version {version_id} does not exist (deleted?)")
    arrays = index_store.load_arrays(conn, version_id)
    for value in arrays.values():
        value.setflags(write=False)
    groups = tuple(
        GroupRecord(
            stable_id=int(g.stable_id),
            size=int(g.size),
            label_terms=list(g.label_terms),
            representatives=[int(d) for d in g.representatives],
        )
        for g in index_store.load_clusters(conn, version_id)
    )
    session.rollback()
    return LoadedVersion(
        collection_id=int(row.collection_id),
        collection=collection,
        version_id=version_id,
        number=int(row.number),
        published_at=row.published_at,
        arrays=arrays,
        groups=groups,
        statistics=dict(row.statistics or {}),
        parameters=dict(row.parameters or {}),
        load_seconds=time.perf_counter() - started,
    )


@dataclass
class _Entry:
    version: LoadedVersion | None
    checked_at: float
    lock: threading.Lock


class VersionCache:
    """Per-collection active versions, thread-safe; one per API process."""

    def __init__(
        self,
        factory: sessionmaker[Session],
        *,
        check_seconds: float = 2.0,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self._factory = factory
        self._check_seconds = check_seconds
        self._clock = clock
        self._entries: dict[str, _Entry] = {}
        self._lock = threading.Lock()
        self.loads = 0  # how many versions this cache has loaded (for tests and metrics)

    def _entry(self, collection: str) -> _Entry:
        with self._lock:
            entry = self._entries.get(collection)
            if entry is None:
                entry = _Entry(None, float("-inf"), threading.Lock())
                self._entries[collection] = entry
            return entry

    def get(self, collection: str, expected_version_id: int | None = None) -> LoadedVersion:
        """The collection's active version; NotFoundError / ConflictError (no index yet).

        ``expected_version_id``: the caller has just read the active version's id; a
        cached version of another id is then checked at once, not after check_seconds.
        """
        entry = self._entry(collection)

        def fresh(version: LoadedVersion | None) -> bool:
            if version is None:
                return False
            if expected_version_id is not None:
                return version.version_id == expected_version_id
            return self._clock() - entry.checked_at < self._check_seconds

        current = entry.version
        if fresh(current):
            assert current is not None
            return current
        with entry.lock:  # one loader per collection; the others wait and reuse its result
            if fresh(entry.version):
                assert entry.version is not None
                return entry.version
            with self._factory() as session:
                found = session.execute(
                    select(COLLECTIONS.c.id, COLLECTIONS.c.active_version_id).where(
                        COLLECTIONS.c.name == collection
                    )
                ).first()
                session.rollback()
                if found is None:
                    entry.version = None
                    raise NotFoundError(
                        f"collection {collection!r} does not exist", {"collection": collection}
                    )
                if found.active_version_id is None:
                    entry.version = None
                    raise ConflictError(
                        f"collection {collection!r} has no index yet: start a build with "
                        f"POST /v1/collections/{collection}/builds",
                        {"collection": collection},
                        code="no_index",
                    )
                active = int(found.active_version_id)
                if entry.version is None or entry.version.version_id != active:
                    entry.version = load_version(session, active, collection)
                    self.loads += 1
            entry.checked_at = self._clock()
            return entry.version

    def forget(self, collection: str) -> None:
        with self._lock:
            self._entries.pop(collection, None)
