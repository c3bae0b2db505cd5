"""One index build from the database: snapshot, geometry, store, publish, retention.

    snapshot   one consistent read of the collection (service.pipeline.snapshot)
    <compute>  the geometry (service.pipeline.index_content.compute_index by default),
               reporting its own stages through the progress callback
    store      a version row in state "building", then its arrays in chunks and its groups,
               committed in batches (writers are never blocked for long)
    publish    ONE transaction: the collection row is locked and pointed at the version,
               the job is marked succeeded (fenced by its lease, refused if a cancel is
               pending), the version gets the next number and is published, the previous
               published version is retired
    retention  retired versions beyond the newest ``keep_versions`` are deleted

A build that fails or is killed at any point before the publish commit leaves a version
in state "building" at most: invisible to every query (they follow
collections.active_version_id only) and deleted by the next worker's garbage collection
(service.storage.index_store.orphan_versions).

Cancellation and shutdown happen at stage boundaries: the StageClock calls the worker's
check whenever the stage changes, and the check raises BuildCancelled, BuildInterrupted
or LeaseLost.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy import case, update
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session, sessionmaker

from service.errors import BuildFailedError
from service.pipeline.index_content_types import (
    DOC_IDS,
    EXCLUDED_DOC_IDS,
    STABLE_GROUP,
    BuildCancelled,
    ComputeFn,
    IndexContent,
    LeaseLost,
    PreviousGroups,
)
from service.pipeline.snapshot import Snapshot, load_snapshot
from service.pipeline.stage_clock import StageClock
from service.storage import index_store, jobs
from service.storage.jobs import Lease
from service.storage.models import Collection
from service.storage.types import utcnow

log = logging.getLogger("tidemap.build")
COLLECTIONS = Collection.__table__
MIN_DOCUMENTS = 3
BUILD_SEED = 0  # fixed: rebuilding the same documents with the same settings is repeatable
STORE_BATCH_BYTES = 32 * 1024 * 1024  # commit the array rows about this often


@dataclass(frozen=True)
class BuildOutcome:
    version_id: int
    number: int
    statistics: dict[str, Any]
    timings: dict[str, float]


def default_compute() -> ComputeFn:
    """The real geometry, imported when first needed."""
    from service.pipeline.index_content import compute_index

    return compute_index  # type: ignore[no-any-return]


def jsonable(value: Any) -> Any:
    """``value`` with numpy scalars and arrays turned into JSON types (NaN, inf -> None)."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return jsonable(value.tolist())
    if isinstance(value, np.bool_ | bool):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating | float):
        number = float(value)
        return number if math.isfinite(number) else None
    if value is None or isinstance(value, int | str):
        return value
    raise ValueError(f"statistics must be JSON-able, got {type(value).__name__}: {value!r:.80}")


def check_enough_documents(snapshot: Snapshot) -> None:
    """Fail fast, with a reason a person can act on, when there is nothing to map."""
    n_with = snapshot.n_docs
    n_without = int(snapshot.excluded_doc_ids.shape[0])
    name = snapshot.collection
    if n_with + n_without == 0:
        raise BuildFailedError(
            f"collection {name!r} has no documents yet: add some, then start the build again",
            {"documents": 0},
        )
    if n_with == 0:
        raise BuildFailedError(
            f"none of the {n_without} documents of collection {name!r} has any terms left "
            f"after tokenisation (language {snapshot.settings.language!r}: stop words, numbers "
            "and very short tokens are dropped), so there is nothing to compare; add documents "
            "with text",
            {"documents": n_without, "without_terms": n_without},
        )
    if n_with < MIN_DOCUMENTS:
        extra = f" ({n_without} more have no terms)" if n_without else ""
        raise BuildFailedError(
            f"collection {name!r} has {n_with} document{'s' if n_with != 1 else ''} with "
            f"terms{extra}; a map needs at least {MIN_DOCUMENTS}: add documents, then start "
            "the build again",
            {"documents_with_terms": n_with, "without_terms": n_without, "min": MIN_DOCUMENTS},
        )


def previous_groups(factory: sessionmaker[Session], snapshot: Snapshot) -> PreviousGroups:
    """The active version's stable group per document (for matching), if it has one."""
    if snapshot.active_version_id is None:
        return PreviousGroups.none(snapshot.next_group_id)
    with factory() as session:
        arrays = index_store.load_arrays(
            session.connection(), snapshot.active_version_id, [DOC_IDS, STABLE_GROUP]
        )
    if DOC_IDS not in arrays or STABLE_GROUP not in arrays:
        return PreviousGroups.none(snapshot.next_group_id)
    return PreviousGroups(
        doc_ids=arrays[DOC_IDS].astype(np.int64, copy=False),
        stable_group=arrays[STABLE_GROUP].astype(np.int64, copy=False),
        next_group_id=snapshot.next_group_id,
    )


def checked_arrays(content: IndexContent, snapshot: Snapshot) -> dict[str, np.ndarray]:
    """The arrays to store: the geometry's, checked, plus the snapshot's document ids."""
    if not isinstance(content, IndexContent):
        raise TypeError(f"the compute function returned {type(content).__name__}, not IndexContent")
    arrays = dict(content.arrays)
    if DOC_IDS in arrays and not np.array_equal(arrays[DOC_IDS], snapshot.doc_ids):
        raise ValueError(f"array {DOC_IDS!r} differs from the snapshot's document ids")
    arrays[DOC_IDS] = snapshot.doc_ids
    arrays[EXCLUDED_DOC_IDS] = snapshot.excluded_doc_ids
    group = arrays.get(STABLE_GROUP)
    if group is not None and group.shape != (snapshot.n_docs,):
        raise ValueError(f"{STABLE_GROUP!r} has shape {group.shape}, expected ({snapshot.n_docs},)")
    stable = [g.stable_id for g in content.groups]
    if len(set(stable)) != len(stable):
        raise ValueError(f"group stable ids repeat: {sorted(stable)}")
    return arrays


def _store(
    factory: sessionmaker[Session],
    lease: Lease,
    snapshot: Snapshot,
    content: IndexContent,
    arrays: dict[str, np.ndarray],
    statistics: dict[str, Any],
    parameters: dict[str, Any],
    progress: StageClock,
) -> int:
    with factory() as session:
        conn = session.connection()
        version_id = index_store.create_version(
            conn,
            collection_id=snapshot.collection_id,
            parameters=parameters,
            statistics=statistics,
            snapshot_change_count=snapshot.change_count,
            n_documents=snapshot.n_docs,
            now=utcnow(),
        )
        if not jobs.set_version(conn, lease, version_id):
            session.rollback()
            raise LeaseLost(f"job {lease.job_id} is no longer this worker's")
        session.commit()
    total = sum(a.nbytes for a in arrays.values()) or 1
    done = pending = 0
    with factory() as session:
        conn = session.connection()
        for name in sorted(arrays):
            rows = list(index_store.array_rows(version_id, name, arrays[name]))
            index_store.insert_array_rows(conn, rows)
            size = sum(len(r["data"]) for r in rows)
            done, pending = done + arrays[name].nbytes, pending + size
            if pending >= STORE_BATCH_BYTES:
                session.commit()
                conn = session.connection()
                pending = 0
            progress("store", done / total)
        groups = [
            {
                "stable_id": int(g.stable_id),
                "size": int(g.size),
                "label_terms": jsonable(g.label_terms),
                "representatives": [int(d) for d in g.representatives],
            }
            for g in content.groups
        ]
        index_store.insert_clusters(conn, version_id, groups)
        session.commit()
    return version_id


def _greater(column: Any, value: int) -> Any:
    return case((column > value, column), else_=value)


def publish(
    factory: sessionmaker[Session],
    lease: Lease,
    snapshot: Snapshot,
    version_id: int,
    *,
    next_group_id: int,
    statistics: dict[str, Any],
    timings: dict[str, float],
) -> int:
    """Make the version the collection's active one, in one transaction; its number."""
    with factory() as session:
        conn = session.connection()
        now = utcnow()
        # The collection row first (the lock order of every writer: collection, then job).
        held = conn.execute(
            update(COLLECTIONS)
            .where(COLLECTIONS.c.id == snapshot.collection_id)
            .values(
                active_version_id=version_id,
                next_group_id=_greater(COLLECTIONS.c.next_group_id, next_group_id),
                last_build_change_count=_greater(
                    COLLECTIONS.c.last_build_change_count, snapshot.change_count
                ),
            )
            .returning(COLLECTIONS.c.id)
        ).first()
        if held is None:
            session.rollback()
            raise LeaseLost(f"collection {snapshot.collection!r} was deleted during the build")
        if not jobs.finish(
            conn,
            lease,
            state=jobs.SUCCEEDED,
            now=now,
            timings=timings,
            statistics=statistics,
            version_id=version_id,
            stage="publish",
            unless_cancel_requested=True,
        ):
            session.rollback()
            row = jobs.job_row(session.connection(), lease.job_id)
            session.rollback()
            if row is not None and row.state == jobs.RUNNING and row.lease_owner == lease.owner:
                raise BuildCancelled("cancelled on request before publication")
            raise LeaseLost(f"job {lease.job_id} is no longer this worker's")
        number = index_store.publish_version(
            conn, collection_id=snapshot.collection_id, version_id=version_id, now=now
        )
        if number is None:
            session.rollback()
            raise LeaseLost(f"version {version_id} was removed before publication")
        session.commit()
    return number


def apply_retention(factory: sessionmaker[Session], collection_id: int, keep: int) -> list[int]:
    """Delete retired versions beyond the newest ``keep``; their ids.

    Safe for queries in flight: an API process holds a loaded version's arrays in memory
    (immutable numpy arrays, service.pipeline.version_cache), so deleting the rows cannot
    change an answer being computed; the process loads the newer version on its next check.
    """
    deleted = []
    with factory() as session:
        old = index_store.versions_beyond_retention(session.connection(), collection_id, keep)
        session.rollback()
        for version_id in old:
            index_store.delete_version(session.connection(), version_id)
            session.commit()
            deleted.append(version_id)
    return deleted


def collect_garbage(factory: sessionmaker[Session]) -> list[int]:
    """Delete versions left "building" by builds that no longer run; their ids."""
    deleted = []
    with factory() as session:
        orphans = index_store.orphan_versions(session.connection())
        session.rollback()
        for version_id in orphans:
            # Checked again inside the deleting transaction, after its first write.
            conn = session.connection()
            conn.execute(
                update(COLLECTIONS)
                .where(COLLECTIONS.c.active_version_id == version_id)
                .values(active_version_id=None)
            )
            if version_id in index_store.orphan_versions(conn):
                index_store.delete_version(conn, version_id)
                session.commit()
                deleted.append(version_id)
            else:
                session.rollback()
    return deleted


def run_build(
    factory: sessionmaker[Session],
    lease: Lease,
    collection_id: int,
    progress: StageClock,
    *,
    compute: ComputeFn | None = None,
    keep_versions: int = 3,
) -> BuildOutcome:
    """Build and publish an index version of the collection for the job ``lease`` holds.

    Raises BuildFailedError (nothing to map, or the geometry refused the input: retrying
    will not help), BuildCancelled / BuildInterrupted / LeaseLost (at a stage boundary),
    or a database error (worth a retry).
    """
    compute = compute or default_compute()
    progress("snapshot", 0.0)
    with factory() as session:
        snapshot = load_snapshot(session, collection_id, seed=BUILD_SEED)
    check_enough_documents(snapshot)
    previous = previous_groups(factory, snapshot)
    progress("snapshot", 1.0)
    try:
        content = compute(snapshot, snapshot.settings, previous, progress)
        arrays = checked_arrays(content, snapshot)
        statistics = jsonable(
            snapshot.statistics() | dict(content.statistics) | {"groups": len(content.groups)}
        )
    except (ValueError, TypeError) as exc:
        # The geometry's guard clauses: the input cannot be mapped with these settings.
        raise BuildFailedError(f"the geometry refused this collection: {exc}") from exc
    parameters = jsonable(snapshot.settings.model_dump() | {"seed": snapshot.seed})
    progress("store", 0.0)
    version_id = _store(factory, lease, snapshot, content, arrays, statistics, parameters, progress)
    progress("publish", 0.0)
    number = publish(
        factory,
        lease,
        snapshot,
        version_id,
        next_group_id=int(content.next_group_id),
        statistics=statistics,
        timings=progress.timings(),
    )
    progress.finish()
    try:
        apply_retention(factory, collection_id, keep_versions)
    except DBAPIError as exc:  # published already; the next publication retries it
        log.warning("retention after publishing version %s failed: %s", version_id, exc)
    timings = progress.timings()
    try:
        with factory() as session:
            session.execute(
                update(jobs.JOBS).where(jobs.JOBS.c.id == lease.job_id).values(timings=timings)
            )
            session.commit()
    except DBAPIError as exc:
        log.warning("could not record the final timings of job %s: %s", lease.job_id, exc)
    return BuildOutcome(version_id, number, statistics, timings)
