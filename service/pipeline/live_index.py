"""The active index as queries must see it: the published version, minus what was deleted
or changed since its snapshot, plus the documents newer than it, placed provisionally.

Every query calls `LiveIndex.get` once. It reads the collection's row (one primary-key
SELECT: its active version and change count), so a DELETE that has returned is seen by
the very next query of any API process, and a newly published version is switched to
at once. Only when the change count moved does it look at documents again:

- the version's rows whose document is gone or changed (revision newer than the
  snapshot) are hidden;
- documents with a newer revision are placed by the Nystrom extension
  (service.pipeline.placement) and answer every query, flagged provisional, until the
  next build. Placements are kept per (document, revision), so a refresh only places
  what is new.

A `Live` object is immutable; a query keeps the one it started with.
"""

from __future__ import annotations

import gc
import threading
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import Engine, bindparam, select

from service.errors import ConflictError, InvalidInputError, NotFoundError
from service.pipeline.placement import Placement, counts_row, place_row
from service.pipeline.query_view import QueryView, build_query_view, coordinate_scale
from service.pipeline.version_cache import VersionCache
from service.storage.codecs import decode_counts
from service.storage.models import Collection, Document, IndexVersion
from service.storage.prepared_read import PreparedRead

COLLECTIONS = Collection.__table__
DOCUMENTS = Document.__table__
VERSIONS = IndexVersion.__table__

__all__ = ["Live", "LiveIndex", "ProvisionalDoc"]


@dataclass(frozen=True, eq=False)
class ProvisionalDoc:
    doc_id: int
    external_id: str
    title: str
    revision: int
    published_at: datetime | None
    placement: Placement | None  # None: no term of the version's vocabulary
    group: int | None  # stable group of its strongest neighbours, None if unplaced
    reason: str | None = None  # why it has no placement


@dataclass(frozen=True, eq=False)
class ComponentExtras:
    """The provisional documents placed in one component, as arrays."""

    docs: list[int]  # indices into Live.provisional
    psi: NDArray[np.float64]  # (p, K)
    pi: NDArray[np.float64]  # (p,) estimates (NaN when unknown)


@dataclass(frozen=True, eq=False)
class Live:
    view: QueryView
    change_count: int
    hidden: NDArray[np.bool_]  # (n rows,) deleted or changed since the snapshot
    provisional: list[ProvisionalDoc]
    by_external: dict[str, int]  # external id -> index into provisional
    extras: dict[int, ComponentExtras] = field(default_factory=dict)

    @property
    def version_number(self) -> int:
        return self.view.version.number

    def visible_rows(self, rows: NDArray[np.int64]) -> NDArray[np.int64]:
        return rows[~self.hidden[rows]]

    def extra_coordinates(self, c: int, t: float) -> NDArray[np.float64]:
        """Diffusion coordinates at ``t`` of the provisional documents of component ``c``."""
        extra = self.extras.get(c)
        m = self.view.n_coordinates(c)
        if extra is None:
            return np.zeros((0, m))
        lam = self.view.eigenvalues(c)
        return extra.psi[:, 1 : m + 1] * coordinate_scale(lam, t, m)[None, :]


def _provisional_group(view: QueryView, placement: Placement) -> int | None:
    """The stable group holding most of the cosine weight of its neighbours."""
    if placement.component is None:
        return None
    stable = view.version.arrays["stable_group"]
    vertex_doc_rows = np.asarray(view.version.arrays["vertex_doc"])[placement.neighbor_vertices]
    groups = np.asarray(stable)[vertex_doc_rows]
    ok = groups >= 0
    if not ok.any():
        return None
    values, inverse = np.unique(groups[ok], return_inverse=True)
    weight = np.bincount(inverse, weights=placement.neighbor_cosines[ok])
    return int(values[int(np.argmax(weight))])


def _place(view: QueryView, blob: bytes) -> tuple[Placement | None, str | None]:
    term_ids, counts = decode_counts(blob)
    row = counts_row(view, term_ids, counts)
    try:
        return place_row(view, row), None
    except InvalidInputError as exc:
        return None, exc.code


@dataclass
class _Entry:
    live: Live | None = None
    lock: threading.Lock = field(default_factory=threading.Lock)


class LiveIndex:
    """Per-collection `Live` objects of one API process (thread-safe)."""

    def __init__(
        self,
        engine: Engine,
        versions: VersionCache,
        on_load: Callable[[QueryView], None] | None = None,
    ) -> None:
        self._engine = engine
        self._versions = versions
        self._on_load = on_load  # called once per loaded view (queries warm their search)
        self._entries: dict[str, _Entry] = {}
        self._views: dict[int, QueryView] = {}
        self._lock = threading.Lock()
        self._read_state = PreparedRead(
            engine,
            select(
                COLLECTIONS.c.id, COLLECTIONS.c.active_version_id, COLLECTIONS.c.change_count
            ).where(COLLECTIONS.c.name == bindparam("name")),
        )

    def _entry(self, collection: str) -> _Entry:
        with self._lock:
            return self._entries.setdefault(collection, _Entry())

    def _state(self, collection: str) -> tuple[int, int, int]:
        """(collection id, active version id, change count): one primary-key read."""
        found = self._read_state.first(name=collection)
        if found is None:
            self.forget(collection)  # deleted: what was loaded of it goes
            self._versions.forget(collection)
            raise NotFoundError(
                f"collection {collection!r} does not exist", {"collection": collection}
            )
        collection_id, active, changes = found
        if active is None:
            self._versions.get(collection)  # raises the no_index conflict with its advice
            raise ConflictError(f"collection {collection!r} has no index yet", code="no_index")
        return int(collection_id), int(active), int(changes)

    def peek(self, collection: str) -> Live | None:
        """The live index if it is current, else None (then `get` must refresh it, which
        may read documents or load a version: callers on an event loop hand that to a
        thread). NotFoundError, or ConflictError before any build."""
        _, active, changes = self._state(collection)
        live = self._entry(collection).live
        return live if _is_current(live, active, changes) else None

    def get(self, collection: str) -> Live:
        """The collection's live index; NotFoundError, or ConflictError before any build."""
        collection_id, active, changes = self._state(collection)
        entry = self._entry(collection)
        live = entry.live
        if _is_current(live, active, changes):
            return live
        with entry.lock:
            live = entry.live
            if _is_current(live, active, changes):
                return live
            view = self._views.get(active)
            loaded = view is None
            if view is None:
                view = self._load_view(collection, active)
            entry.live = self._refresh(view, collection_id, previous=live)
            if loaded:
                self._drop_unused_views()
                _settle_long_lived()
                if self._on_load is not None:
                    self._on_load(view)
            return entry.live

    def _load_view(self, collection: str, active: int) -> QueryView:
        version = self._versions.get(collection, expected_version_id=active)
        with self._engine.connect() as conn:
            view = build_query_view(conn, version)
        with self._lock:
            self._views[version.version_id] = view
        return view

    def _drop_unused_views(self) -> None:
        """Forget the views no entry answers from any more (a query still holding its
        `Live` keeps its view alive by reference until it is done)."""
        with self._lock:
            in_use = {e.live.view.version.version_id for e in self._entries.values() if e.live}
            self._views = {v: w for v, w in self._views.items() if v in in_use}

    def _refresh(self, view: QueryView, collection_id: int, previous: Live | None) -> Live:
        version_id = view.version.version_id
        with self._engine.connect() as conn:
            snapshot_cc, changes = conn.execute(
                select(VERSIONS.c.snapshot_change_count, COLLECTIONS.c.change_count)
                .select_from(
                    VERSIONS.join(COLLECTIONS, COLLECTIONS.c.id == VERSIONS.c.collection_id)
                )
                .where(VERSIONS.c.id == version_id)
            ).one()
            unchanged = np.fromiter(
                conn.execute(
                    select(DOCUMENTS.c.id).where(
                        DOCUMENTS.c.collection_id == collection_id,
                        DOCUMENTS.c.revision <= snapshot_cc,
                    )
                ).scalars(),
                dtype=np.int64,
            )
            newer = conn.execute(
                select(
                    DOCUMENTS.c.id,
                    DOCUMENTS.c.external_id,
                    DOCUMENTS.c.title,
                    DOCUMENTS.c.revision,
                    DOCUMENTS.c.published_at,
                    DOCUMENTS.c.term_counts,
                )
                .where(
                    DOCUMENTS.c.collection_id == collection_id,
                    DOCUMENTS.c.revision > snapshot_cc,
                )
                .order_by(DOCUMENTS.c.id)
            ).all()
        hidden = ~np.isin(view.doc_ids, unchanged, assume_unique=True)
        known: dict[tuple[int, int], ProvisionalDoc] = {}
        if previous is not None and previous.view is view:
            known = {(p.doc_id, p.revision): p for p in previous.provisional}
        provisional: list[ProvisionalDoc] = []
        for doc_id, ext, title, revision, published, blob in newer:
            doc = known.get((int(doc_id), int(revision)))
            if doc is None:
                placement, reason = _place(view, bytes(blob))
                doc = ProvisionalDoc(
                    doc_id=int(doc_id),
                    external_id=ext,
                    title=title,
                    revision=int(revision),
                    published_at=published,
                    placement=placement,
                    group=None if placement is None else _provisional_group(view, placement),
                    reason=reason,
                )
            provisional.append(doc)
        return Live(
            view=view,
            change_count=int(changes),
            hidden=hidden,
            provisional=provisional,
            by_external={p.external_id: i for i, p in enumerate(provisional)},
            extras=_extras(provisional),
        )

    def forget(self, collection: str) -> None:
        with self._lock:
            self._entries.pop(collection, None)
        self._drop_unused_views()


def _settle_long_lived() -> None:
    """Keep the cyclic garbage collector off a loaded version's objects.

    A 100k-document version is some 185,000 long-lived Python objects (ids, titles, their
    dicts); a full collection walks them all, 115 ms on this machine, and every request
    waiting on that process waits with it (neighbors at 100k, 2 workers: p99 44.7 ms
    without this, 29.6 ms with it, one pair of runs). Frozen objects are skipped by the
    collector (gc.freeze) but still freed by reference counting, which is how an old
    version goes (tests/pipeline/test_live_index.py checks that it is freed). Once per
    loaded version: unfreeze, so cyclic garbage frozen last time can go, collect, freeze.
    """
    gc.unfreeze()
    gc.collect()
    gc.freeze()


def _is_current(live: Live | None, active: int, changes: int) -> bool:
    """Whether ``live`` answers for the active version at this change count."""
    return (
        live is not None and live.view.version.version_id == active and live.change_count == changes
    )


def _extras(provisional: list[ProvisionalDoc]) -> dict[int, ComponentExtras]:
    by_component: dict[int, list[int]] = {}
    for i, doc in enumerate(provisional):
        p = doc.placement
        if p is not None and p.component is not None:
            by_component.setdefault(p.component, []).append(i)
    out = {}
    for c, docs in by_component.items():
        placements = [provisional[i].placement for i in docs]
        out[c] = ComponentExtras(
            docs=docs,
            psi=np.vstack([p.psi for p in placements if p is not None and p.psi is not None]),
            pi=np.array(
                [
                    np.nan if p is None or p.pi_estimate is None else p.pi_estimate
                    for p in placements
                ]
            ),
        )
    return out
