"""A stand-in for the geometry, for tests of the build machinery only.

``fake_compute_index`` is not a geometry: it derives a few arrays from the snapshot
(document frequencies, two coordinates drawn from the snapshot's seed, two groups by
document id parity) so that the machinery around it (snapshot, store, publish, groups'
stable ids, retention, leases) can be tested without the real computation.
``FakeCompute`` wraps it to block or sleep inside a stage, which the fault tests need.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from service.pipeline.collection_settings import CollectionSettings
from service.pipeline.index_content_types import (
    STABLE_GROUP,
    GroupRecord,
    IndexContent,
    PreviousGroups,
    ProgressFn,
)
from service.pipeline.snapshot import Snapshot

FAKE_STAGES = ("fake-vectors", "fake-groups")


def _stable_ids(
    raw: np.ndarray, doc_ids: np.ndarray, previous: PreviousGroups
) -> tuple[np.ndarray, int]:
    """Each raw group keeps the previous stable id most of its documents had, else a new one."""
    next_id = previous.next_group_id
    before = dict(zip(previous.doc_ids.tolist(), previous.stable_group.tolist(), strict=True))
    out = np.full(raw.shape, -1, dtype=np.int64)
    taken: set[int] = set()
    for g in np.unique(raw):
        members = doc_ids[raw == g]
        old = [before[d] for d in members.tolist() if before.get(d, -1) >= 0]
        ids, votes = np.unique(old, return_counts=True) if old else (np.zeros(0), np.zeros(0))
        choice = int(ids[np.argmax(votes)]) if ids.size else -1
        if choice < 0 or choice in taken:
            choice, next_id = next_id, next_id + 1
        taken.add(choice)
        out[raw == g] = choice
    return out, next_id


def fake_compute_index(
    snapshot: Snapshot,
    settings: CollectionSettings,
    previous: PreviousGroups,
    progress: ProgressFn,
) -> IndexContent:
    n = snapshot.n_docs
    progress(FAKE_STAGES[0], 0.0)
    df = np.asarray((snapshot.counts > 0).sum(axis=0)).ravel().astype(np.int64)
    coordinates = np.random.default_rng(snapshot.seed).standard_normal((n, 2))
    progress(FAKE_STAGES[0], 1.0)
    progress(FAKE_STAGES[1], 0.0)
    stable, next_id = _stable_ids(snapshot.doc_ids % 2, snapshot.doc_ids, previous)
    groups = []
    for sid in np.unique(stable).tolist():
        members = snapshot.doc_ids[stable == sid]
        groups.append(
            GroupRecord(
                stable_id=int(sid),
                size=int(members.shape[0]),
                label_terms=[{"term": snapshot.terms[0], "score": 1.0, "count": int(df[0])}],
                representatives=members[:3].tolist(),
            )
        )
    progress(FAKE_STAGES[1], 1.0)
    return IndexContent(
        arrays={
            "coordinates": coordinates,
            "term_ids": snapshot.term_ids,
            "terms": np.array(snapshot.terms, dtype=str),
            "document_frequency": df,
            STABLE_GROUP: stable,
        },
        groups=groups,
        statistics={
            "vocabulary_size": len(snapshot.terms),
            "edges": max(0, n - 1),
            "components": 1,
            "isolated": 0,
            "eigenvalues": [1.0, np.float64(0.5)],
            "coordinates": 2,
        },
        next_group_id=next_id,
    )


@dataclass
class FakeCompute:
    """``fake_compute_index`` that can stop inside ``stage``: it sets ``entered``, then
    waits for ``release`` (if given) and/or sleeps ``sleep`` seconds, reporting progress."""

    stage: str = FAKE_STAGES[0]
    release: threading.Event | None = None
    sleep: float = 0.0
    entered: threading.Event = field(default_factory=threading.Event)
    on_enter: Callable[[], None] | None = None  # called once, on entering ``stage``
    calls: list[tuple[int, float, float]] = field(default_factory=list)  # (collection, t0, t1)

    def __call__(
        self,
        snapshot: Snapshot,
        settings: CollectionSettings,
        previous: PreviousGroups,
        progress: ProgressFn,
    ) -> IndexContent:
        started = time.monotonic()

        def wrapped(stage: str, fraction: float) -> None:
            progress(stage, fraction)
            if stage == self.stage and fraction == 0.0:
                if self.on_enter is not None and not self.entered.is_set():
                    self.on_enter()
                self.entered.set()
                if self.release is not None:
                    while not self.release.wait(0.05):
                        progress(stage, 0.5)
                end = time.monotonic() + self.sleep
                while time.monotonic() < end:
                    time.sleep(min(0.05, self.sleep))
                    progress(stage, 0.5)

        content = fake_compute_index(snapshot, settings, previous, wrapped)
        self.calls.append((snapshot.collection_id, started, time.monotonic()))
        return content
