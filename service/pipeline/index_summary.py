"""The active index version of a collection, as ``GET /v1/collections/{c}/index`` shows it.

Staleness is exact. A build records the change count C its snapshot saw, and every
document row carries the change count its last write ended with (documents.revision), so
the rows with revision <= C are exactly those in the snapshot, unchanged. The version's
stored document ids (``doc_ids`` and ``excluded_doc_ids``, the documents without terms)
then split the newer rows into added and changed, and what is missing is deleted:

    changed = |{rows with revision > C} ∩ V|      added = |{rows with revision > C} \\ V|
    deleted = |V| - |{rows with revision <= C}| - changed

A document deleted and stored again under the same external id is a new row: it counts
as deleted and added.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.errors import ConflictError, NotFoundError
from service.pipeline.collections import check_name
from service.pipeline.index_content_types import DOC_IDS, EXCLUDED_DOC_IDS, SUMMARY_KEYS
from service.storage import index_store, jobs
from service.storage.models import Collection, Document

COLLECTIONS = Collection.__table__
DOCUMENTS = Document.__table__


def staleness(
    session: Session, collection_id: int, change_count: int, version_ids: np.ndarray
) -> dict[str, int]:
    """Documents added, changed and deleted since a snapshot that saw ``change_count``
    and held the documents ``version_ids`` (sorted)."""
    conn = session.connection()
    newer = np.asarray(
        conn.execute(
            select(DOCUMENTS.c.id).where(
                DOCUMENTS.c.collection_id == collection_id, DOCUMENTS.c.revision > change_count
            )
        )
        .scalars()
        .all(),
        dtype=np.int64,
    )
    unchanged = int(
        conn.execute(
            select(func.count()).where(
                DOCUMENTS.c.collection_id == collection_id, DOCUMENTS.c.revision <= change_count
            )
        ).scalar_one()
    )
    in_version = np.isin(newer, version_ids, assume_unique=True)
    changed = int(in_version.sum())
    added = int(newer.shape[0]) - changed
    deleted = int(version_ids.shape[0]) - unchanged - changed
    return {
        "added": added,
        "changed": changed,
        "deleted": deleted,
        "total": added + changed + deleted,
    }


def _no_index(collection: str, building: Any) -> ConflictError:
    how = (
        f"build {building.id} is {building.state}; wait for it (GET /v1/collections/"
        f"{collection}/builds/{building.id})"
        if building is not None
        else f"start one with POST /v1/collections/{collection}/builds (or `tidemap build "
        f"{collection}`)"
    )
    return ConflictError(
        f"collection {collection!r} has no index yet: {how}",
        {
            "collection": collection,
            "build": None if building is None else {"id": building.id, "state": building.state},
        },
        code="no_index",
    )


def snapshot_ids(conn: Any, version: Any) -> np.ndarray:
    """The documents the version's snapshot held (with terms or without), sorted."""
    ids = index_store.load_arrays(conn, int(version.id), [DOC_IDS, EXCLUDED_DOC_IDS])
    return np.sort(
        np.concatenate(
            [
                ids.get(DOC_IDS, np.zeros(0, np.int64)),
                ids.get(EXCLUDED_DOC_IDS, np.zeros(0, np.int64)),
            ]
        ).astype(np.int64)
    )


def index_summary(session: Session, collection: str) -> dict[str, Any]:
    """The active version's size, spectrum, groups and staleness; 409 without one."""
    conn = session.connection()
    coll = conn.execute(
        select(COLLECTIONS).where(COLLECTIONS.c.name == check_name(collection))
    ).first()
    if coll is None:
        raise NotFoundError(f"collection {collection!r} does not exist", {"collection": collection})
    building = jobs.active_build(conn, int(coll.id))
    if coll.active_version_id is None:
        raise _no_index(collection, building)
    version = index_store.version_row(conn, int(coll.active_version_id))
    stats = dict(version.statistics or {})
    summary: dict[str, Any] = {
        "collection": collection,
        "version": int(version.number),
        "built_at": version.published_at.isoformat() if version.published_at else None,
        "documents": int(version.n_documents),
        "documents_excluded": stats.get("documents_excluded", {}),
    }
    summary |= {key: stats.get(key) for key in SUMMARY_KEYS}
    summary["groups"] = stats.get("groups")
    summary["parameters"] = dict(version.parameters or {})
    changes_since = int(coll.change_count) - int(version.snapshot_change_count)
    if changes_since == 0:
        # Every write moves the change count: none since the snapshot, nothing is stale
        # (the id arrays and the 100k-row count behind `staleness` are skipped: 5.8 ms
        # to 0.6 ms per summary at 100k).
        summary["staleness"] = {"added": 0, "changed": 0, "deleted": 0, "total": 0}
    else:
        summary["staleness"] = staleness(
            session, int(coll.id), int(version.snapshot_change_count), snapshot_ids(conn, version)
        )
    summary["staleness"]["changes_since"] = changes_since
    summary["building"] = (
        None if building is None else {"id": int(building.id), "state": building.state}
    )
    session.rollback()
    return summary
