"""A whole index build from the database, timed: ``tidemap bench build --from-database``.

1. N invented documents are stored through ``service.pipeline.documents.upsert_batch``
   (text made from ``service.bench.synthetic_text.synthetic_counts``: topics of very
   different sizes, near and exact duplicates, written out with invented words); the
   ingestion is not timed here (``tidemap bench ingest`` measures it).
2. A build job is queued, claimed and run by ``service.pipeline.build_run.run_build``:
   load (the snapshot), geometry, store, publish, each timed by the build's StageClock.
3. A fresh VersionCache (what an API process holds) loads the published version.

``geometry="shapes-only"`` replaces the geometry by arrays of the shapes the real one
stores (TF-IDF rows, 41 eigenvector columns, 15 neighbours, ...), to measure store,
publish and load before or without the geometry; the report says which was used.
Measures speed, never quality.
"""

from __future__ import annotations

import resource
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker

from service.bench.ingest import invented_vocabulary
from service.bench.synthetic_text import synthetic_counts
from service.errors import NotFoundError
from service.pipeline.build_run import BuildOutcome, run_build
from service.pipeline.builds import enqueue_build
from service.pipeline.collection_settings import CollectionSettings
from service.pipeline.collections import create_collection, delete_collection
from service.pipeline.documents import upsert_batch
from service.pipeline.index_content_types import (
    STABLE_GROUP,
    ComputeFn,
    GroupRecord,
    IndexContent,
    PreviousGroups,
    ProgressFn,
)
from service.pipeline.snapshot import Snapshot
from service.pipeline.stage_clock import StageClock
from service.pipeline.version_cache import VersionCache
from service.storage import jobs
from service.storage.jobs import Lease
from service.storage.schema import schema_status, upgrade
from service.storage.session import make_engine, make_session_factory
from service.storage.types import utcnow

COLLECTION = "bench-build"
LOAD_STAGE, STORE_STAGE, PUBLISH_STAGE = "snapshot", "store", "publish"
Progress = Callable[[str], None]


def invented_texts(n_docs: int, seed: int) -> list[dict[str, Any]]:
    """Documents whose words follow ``synthetic_counts`` (term j -> the j-th invented word)."""
    counts, _ = synthetic_counts(n_docs, n_terms=30_000, rng=seed)
    words = np.array(invented_vocabulary(counts.shape[1], np.random.default_rng(seed)))
    docs = []
    for i in range(n_docs):
        lo, hi = counts.indptr[i], counts.indptr[i + 1]
        tokens = words[np.repeat(counts.indices[lo:hi], counts.data[lo:hi])]
        docs.append({"id": f"b{i:07d}", "text": " ".join(tokens.tolist()) or "empty"})
    return docs


def shapes_only_compute(
    snapshot: Snapshot, settings: CollectionSettings, previous: PreviousGroups, progress: ProgressFn
) -> IndexContent:
    """Arrays of the sizes the real geometry stores, filled with noise (benchmark only)."""
    n, k, m = snapshot.n_docs, settings.neighbors, 41
    rng = np.random.default_rng(snapshot.seed)
    progress("geometry", 0.0)
    tf = snapshot.counts.astype(np.float32)
    vocabulary = np.arange(min(settings.vocab_size, tf.shape[1]), dtype=np.int64)
    arrays = {
        "vocabulary": vocabulary,
        "idf": rng.random(vocabulary.shape[0]),
        "tfidf_data": tf.data,
        "tfidf_indices": tf.indices.astype(np.int32),
        "tfidf_indptr": tf.indptr.astype(np.int64),
        "knn_indices": rng.integers(0, n, size=(n, k), dtype=np.int32),
        "knn_distances": rng.random((n, k), dtype=np.float32),
        "sigma": rng.random(n),
        "psi": rng.standard_normal((n, m)),
        "pi": np.full(n, 1.0 / max(n, 1)),
        "degrees": rng.random(n),
        "eigenvalues": np.linspace(1.0, 0.5, m),
        STABLE_GROUP: rng.integers(0, 20, size=n).astype(np.int64),
    }
    progress("geometry", 1.0)
    groups = [GroupRecord(g, int((arrays[STABLE_GROUP] == g).sum()), [], []) for g in range(20)]
    return IndexContent(arrays=arrays, groups=groups, statistics={}, next_group_id=20)


def _peak_rss_mb() -> float:
    return round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0, 1)


@dataclass(frozen=True)
class StoredBuild:
    outcome: BuildOutcome
    seconds_ingest: float
    seconds_build: float
    peak_rss_mb_before_build: float


def store_and_build(
    factory: sessionmaker[Session],
    collection: str,
    docs: list[dict[str, Any]],
    *,
    compute: ComputeFn | None = None,
    say: Progress = lambda _m: None,
) -> StoredBuild:
    """Replace ``collection`` by ``docs`` (upsert shape), then queue, claim and run one build.

    Pass ``docs`` without keeping a reference: the list is dropped before the build, so the
    peak before the build covers inventing and storing the text only.
    """
    with factory() as session:
        try:
            delete_collection(session, collection)
        except NotFoundError:
            session.rollback()
        create_collection(session, collection)
        say(f"storing {len(docs)} documents in {session.get_bind().dialect.name}")
        started = time.perf_counter()
        upsert_batch(
            session,
            collection,
            enumerate(docs),
            max_text_bytes=1 << 20,
            chunk_size=1000,
            report_all=False,
        )
        seconds_ingest = time.perf_counter() - started
        del docs
        job = enqueue_build(session, collection, trigger="cli", max_attempts=1).job
        row = jobs.claim(session.connection(), owner="bench", lease_seconds=3600, now=utcnow())
        session.commit()
    assert row is not None and int(row.id) == job["id"], "another job was claimed"
    say("building")
    rss_before_build = _peak_rss_mb()  # the invented text and the ingest
    started = time.perf_counter()
    outcome = run_build(
        factory,
        Lease(int(row.id), "bench", int(row.attempts)),
        int(row.collection_id),
        StageClock(),
        compute=compute,
    )
    return StoredBuild(outcome, seconds_ingest, time.perf_counter() - started, rss_before_build)


def run_build_benchmark(
    *,
    n_docs: int,
    database_url: str | None = None,
    seed: int = 0,
    geometry: str = "real",
    progress: Progress | None = None,
) -> dict[str, Any]:
    """Store ``n_docs`` invented documents, build and publish their index, load it back."""
    if geometry not in ("real", "shapes-only"):
        raise ValueError(f"geometry must be 'real' or 'shapes-only', got {geometry!r}")
    say = progress or (lambda _m: None)
    compute: ComputeFn | None = shapes_only_compute if geometry == "shapes-only" else None
    with tempfile.TemporaryDirectory(prefix="tidemap-bench-build-") as tmp:
        url = database_url or f"sqlite:///{Path(tmp) / 'bench.db'}"
        engine = make_engine(url)
        try:
            if schema_status(engine).state == "behind":
                upgrade(engine)
            factory = make_session_factory(engine)
            say(f"inventing {n_docs} documents (seed {seed})")
            stored = store_and_build(
                factory, COLLECTION, invented_texts(n_docs, seed), compute=compute, say=say
            )
            outcome, seconds_ingest = stored.outcome, stored.seconds_ingest
            seconds_total, rss_before_build = stored.seconds_build, stored.peak_rss_mb_before_build
            timings = outcome.timings
            say("loading the version as an API process would")
            loaded = VersionCache(factory, check_seconds=0).get(COLLECTION)
            geometry_seconds = sum(
                v for k, v in timings.items() if k not in (LOAD_STAGE, STORE_STAGE, PUBLISH_STAGE)
            )
            return {
                "database": make_url(url).get_backend_name(),
                "geometry": geometry,
                "docs": n_docs,
                "documents_mapped": outcome.statistics.get("documents"),
                "seconds_ingest": round(seconds_ingest, 2),
                "seconds_load": timings.get(LOAD_STAGE),
                "seconds_geometry": round(geometry_seconds, 3),
                "seconds_store": timings.get(STORE_STAGE),
                "seconds_publish": timings.get(PUBLISH_STAGE),
                "seconds_total": round(seconds_total, 3),
                "seconds_version_load": round(loaded.load_seconds, 3),
                "version_mb": round(sum(a.nbytes for a in loaded.arrays.values()) / 2**20, 1),
                "stage_seconds": timings,
                "peak_rss_mb": _peak_rss_mb(),
                # The process's peak before the build started: when equal to peak_rss_mb,
                # the build itself stayed below what inventing and storing the text took.
                "peak_rss_mb_before_build": rss_before_build,
            }
        finally:
            engine.dispose()
