"""The geometry step of a build: a snapshot in, the arrays of an index version out.

`map_corpus` does the numerics; this module gives the map's groups their stable ids
(Hungarian matching against the active version) and lays everything out as named arrays,
which is what queries and the Nystrom extension load back.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from service.errors import BuildFailedError
from service.geometry.matching import match_groups
from service.pipeline.collection_settings import CollectionSettings
from service.pipeline.coordinate_indexes import build_coordinate_indexes
from service.pipeline.index_content_types import (
    DOC_IDS,
    STABLE_GROUP,
    GroupRecord,
    IndexContent,
    PreviousGroups,
    ProgressFn,
)
from service.pipeline.mapping import CorpusMap, MapParams, map_corpus
from service.pipeline.snapshot import Snapshot


def map_params(settings: CollectionSettings, seed: int) -> MapParams:
    """The numerical parameters of a build, from the collection's settings."""
    return MapParams(
        min_df=settings.min_df,
        max_df=settings.max_df,
        vocab_size=settings.vocab_size,
        neighbors=settings.neighbors,
        alpha=settings.alpha,
        diffusion_time=settings.diffusion_time,
        max_coordinates=settings.max_coordinates,
        n_groups=None if settings.groups == "auto" else int(settings.groups),
        seed=seed,
    )


def _stable_ids(
    snapshot: Snapshot, corpus: CorpusMap, previous: PreviousGroups
) -> tuple[np.ndarray, np.ndarray, int]:
    """Stable id per local group and per document, and the next free id."""
    n_local = len(corpus.groups)
    if n_local == 0:
        return np.zeros(0, np.int64), np.full(snapshot.n_docs, -1, np.int64), previous.next_group_id
    # The previous stable group of each current document (-1: new, or had none).
    before = np.full(snapshot.n_docs, -1, dtype=np.int64)
    if previous.doc_ids.size:
        pos = np.searchsorted(previous.doc_ids, snapshot.doc_ids)
        pos = np.clip(pos, 0, previous.doc_ids.size - 1)
        hit = previous.doc_ids[pos] == snapshot.doc_ids
        before[hit] = previous.stable_group[pos[hit]]
    labelled = corpus.group >= 0
    existing = np.unique(previous.stable_group[previous.stable_group >= 0])
    match = match_groups(
        before[labelled],
        corpus.group[labelled],
        previous_ids=existing,
        next_id=previous.next_group_id,
    )
    stable_of_local = np.asarray(match.stable_ids, dtype=np.int64)
    per_doc = np.full(snapshot.n_docs, -1, dtype=np.int64)
    per_doc[labelled] = stable_of_local[corpus.group[labelled]]
    return stable_of_local, per_doc, int(match.next_id)


def compute_index(
    snapshot: Snapshot,
    settings: CollectionSettings,
    previous_groups: PreviousGroups,
    progress: ProgressFn,
) -> IndexContent:
    """Map the snapshot and return the version's arrays, groups and statistics."""
    try:
        corpus = map_corpus(snapshot.counts, map_params(settings, snapshot.seed), progress)
    except ValueError as exc:
        # map_corpus words its refusals for people (too few documents, no terms left).
        raise BuildFailedError(str(exc), code="cannot_map") from exc
    progress("groups", 0.9)
    stable_of_local, stable_group, next_id = _stable_ids(snapshot, corpus, previous_groups)
    term_ids = np.asarray(snapshot.term_ids, dtype=np.int64)
    groups = [
        GroupRecord(
            stable_id=int(stable_of_local[g.label]),
            size=g.size,
            label_terms=[
                {"term": snapshot.terms[col], "score": round(z, 4), "count": count}
                for col, z, count in g.terms
            ],
            representatives=[int(snapshot.doc_ids[d]) for d in g.representatives],
        )
        for g in corpus.groups
    ]
    tfidf = corpus.tfidf
    arrays: dict[str, np.ndarray] = {
        DOC_IDS: np.asarray(snapshot.doc_ids, dtype=np.int64),
        STABLE_GROUP: stable_group,
        "status": corpus.status,
        "duplicate_of": corpus.duplicate_of,
        "vertex": corpus.vertex,
        "vertex_doc": corpus.vertex_doc,
        "knn_indices": corpus.knn_indices,
        "knn_distances": corpus.knn_distances,
        "sigma": corpus.sigma,
        "component": corpus.component,
        "eigenvalues": corpus.eigenvalues,
        "smallest_eigenvalue": corpus.smallest_eigenvalue,
        "alpha_degree_sum": corpus.alpha_degree_sum,
        "psi": corpus.psi,
        "pi": corpus.pi,
        "degrees": corpus.degrees,
        "n_coordinates": corpus.n_coordinates,
        "group_stable_ids": stable_of_local,
        "vocabulary_term_ids": term_ids[corpus.vocabulary],
        "idf": corpus.idf,
        "tfidf_indptr": tfidf.indptr.astype(np.int64),
        "tfidf_indices": tfidf.indices.astype(np.int32),
        "tfidf_data": tfidf.data.astype(np.float32),
        "sigma_floor": np.array([corpus.sigma_floor]),
    }
    # Related-document search of the large components, built once here for every API
    # process (service.pipeline.coordinate_indexes).
    progress("coordinate index", 0.95)
    search_arrays, search_stats = build_coordinate_indexes(arrays, settings.diffusion_time)
    arrays |= search_arrays
    stats = corpus.statistics
    statistics: dict[str, Any] = {
        "vocabulary_size": stats["vocabulary"],
        "edges": stats["edges"],
        "components": len(stats["components"]),
        "component_sizes": stats["components"],
        "isolated": stats["documents_isolated"],
        "no_terms": stats["documents_no_terms"],
        "duplicates": stats["duplicates"],
        "eigenvalues": stats["eigenvalues"],
        "coordinates": stats["coordinates"],
        "groups": stats["groups"],
        "neighbors": stats["neighbors"],
        "knn_method": stats["knn_method"],
        "knn_recall": stats["knn_recall"],
        "solvers": stats["solvers"],
        "max_residual": stats["max_residual"],
        "seconds": stats["seconds"],
        "seed": snapshot.seed,
        "coordinate_indexes": search_stats,
    }
    return IndexContent(arrays=arrays, groups=groups, statistics=statistics, next_group_id=next_id)
