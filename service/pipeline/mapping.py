"""From raw term counts to a whole map on plain arrays: weighting, graph, spectrum, groups.

The one place that strings the pure `text` and `geometry` functions together in the order
DESIGN.md gives. It knows nothing of the database: `index_content` feeds it a snapshot,
the benchmarks feed it synthetic counts. `map_points` runs the same chain from the kNN
step on for dense points (`service.pipeline.mapping_graph` holds that shared part).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp

from service.geometry.duplicates import exact_duplicate_groups
from service.geometry.knn import cosine_knn
from service.geometry.labels import distinguishing_terms, representatives
from service.pipeline.mapping_graph import (
    PointMap,
    ProgressFn,
    graph_statistics,
    map_graph,
    map_points,
    no_progress,
    record_stage,
)
from service.text.weighting import fit_tfidf

__all__ = [
    "ISOLATED",
    "MAPPED",
    "NO_TERMS",
    "STATUS_NAMES",
    "CorpusMap",
    "GroupSummary",
    "MapParams",
    "PointMap",
    "ProgressFn",
    "map_corpus",
    "map_points",
]

# Per-document status codes stored with a version.
MAPPED, NO_TERMS, ISOLATED = 0, 1, 2
STATUS_NAMES = {MAPPED: "mapped", NO_TERMS: "no_terms", ISOLATED: "isolated"}


@dataclass(frozen=True)
class MapParams:
    """Everything that decides a map; stored with each index version."""

    min_df: int = 2
    max_df: float = 0.5
    vocab_size: int = 50_000
    neighbors: int = 15
    alpha: float = 1.0
    diffusion_time: float = 1.0
    max_coordinates: int = 40
    coordinate_threshold: float = 0.05
    n_groups: int | None = None
    max_groups: int = 50
    # Components smaller than this get no coordinates: too few documents to have a shape.
    min_component_size: int = 10
    # Components smaller than this form one group each instead of being clustered.
    min_clustered_size: int = 60
    knn_method: str = "auto"
    seed: int = 0
    n_label_terms: int = 10
    n_representatives: int = 5


@dataclass(frozen=True)
class GroupSummary:
    """One group of the map, in local numbering (stable ids are given by the caller)."""

    label: int
    component: int
    size: int
    terms: list[tuple[int, float, int]]  # (column of the input counts, z-score, count)
    representatives: list[int]  # document indices


@dataclass(frozen=True)
class CorpusMap:
    """A map of ``n`` documents; "vertex" arrays cover the graph's distinct documents.

    Exact duplicates (equal TF-IDF rows) share one vertex: every copy gets the
    representative's coordinates and group, and is reported in ``duplicate_of``.
    """

    vocabulary: np.ndarray  # (V,) input columns kept
    idf: np.ndarray  # (V,)
    tfidf: sp.csr_matrix  # (n, V) float32, unit rows (zero for no_terms documents)
    status: np.ndarray  # (n,) int8: MAPPED, NO_TERMS, ISOLATED
    duplicate_of: np.ndarray  # (n,) int64: representative document, -1 if none
    vertex: np.ndarray  # (n,) int64: graph vertex of the document, -1 for no_terms
    vertex_doc: np.ndarray  # (n_v,) int64: document standing for each vertex
    knn_indices: np.ndarray  # (n_v, k) int32 vertex ids, ascending distance
    knn_distances: np.ndarray  # (n_v, k) float32, 1 - cos
    sigma: np.ndarray  # (n_v,) self-tuning bandwidths
    component: np.ndarray  # (n_v,) int32: mapped component, -1 for isolated vertices
    eigenvalues: np.ndarray  # (C, m + 1) per mapped component, zero-padded
    psi: np.ndarray  # (n_v, m + 1) right eigenvectors of the vertex's component
    pi: np.ndarray  # (n_v,) stationary distribution within the component
    degrees: np.ndarray  # (n_v,) raw kernel degrees (Nystrom needs them)
    n_coordinates: np.ndarray  # (C,) coordinates kept at the default t
    smallest_eigenvalue: np.ndarray  # (C,) lower estimate of each component's spectrum
    alpha_degree_sum: np.ndarray  # (C,) sum of the alpha-normalised degrees (pi's denominator)
    sigma_floor: float  # the bandwidth floor; a new point's bandwidth gets the same
    group: np.ndarray  # (n,) int64 local group label, -1 for none
    groups: list[GroupSummary]
    statistics: dict[str, Any] = field(default_factory=dict)


def map_corpus(
    counts: sp.csr_matrix, params: MapParams, progress: ProgressFn = no_progress
) -> CorpusMap:
    """Build the map of a collection from its raw term counts (documents x terms).

    Raises ValueError (with a sentence a person understands) when fewer than three
    documents keep any term after the vocabulary selection.
    """
    timings: dict[str, float] = {}
    clock = time.perf_counter()
    n_docs = counts.shape[0]
    progress("weighting", 0.0)
    weighting = fit_tfidf(
        counts, min_df=params.min_df, max_df=params.max_df, vocab_size=params.vocab_size
    )
    X = weighting.matrix
    status = np.full(n_docs, MAPPED, dtype=np.int8)
    status[weighting.empty_rows] = NO_TERMS
    kept = np.flatnonzero(status == MAPPED)
    if kept.size < 3:
        raise ValueError(
            f"only {kept.size} of {n_docs} documents keep any term after the vocabulary "
            f"selection (min_df={params.min_df}, max_df={params.max_df}); a map needs at "
            "least 3: add documents or lower min_df"
        )
    clock = record_stage(timings, "weighting", clock)

    # Exact duplicates collapse to one vertex: identical rows would give sigma = 0 and a
    # tight clique that only slows the eigensolver down.
    progress("graph", 0.0)
    dup_labels = exact_duplicate_groups(X[kept])
    representative_rows = np.unique(dup_labels)
    vertex_doc = kept[representative_rows]
    vertex = np.full(n_docs, -1, dtype=np.int64)
    vertex[kept] = np.searchsorted(representative_rows, dup_labels)
    duplicate_of = np.full(n_docs, -1, dtype=np.int64)
    copies = kept[dup_labels != np.arange(kept.size)]
    duplicate_of[copies] = vertex_doc[vertex[copies]]
    n_v = vertex_doc.size
    if n_v < 3:
        raise ValueError(
            f"the {kept.size} documents with terms have only {n_v} distinct texts; a map "
            "needs at least 3 different documents"
        )
    k = min(params.neighbors, n_v - 1)
    knn = cosine_knn(X[vertex_doc], k, method=params.knn_method, rng=params.seed)  # type: ignore[arg-type]
    geo = map_graph(knn, params, timings, clock, progress, unrelated=1.0)
    clock = time.perf_counter()

    group = np.full(n_docs, -1, dtype=np.int64)
    group[kept] = geo.vertex_group[vertex[kept]]
    # Label terms come from the working vocabulary: terms too rare or too common to be
    # weighted would not describe a group either.
    groups = _summaries(
        sp.csr_matrix(counts)[:, weighting.vocabulary],
        weighting.vocabulary,
        group,
        geo.vertex_group,
        vertex_doc,
        geo.centres,
        geo.component,
        params,
    )
    status[kept[geo.component[vertex[kept]] < 0]] = ISOLATED
    timings["groups"] = round(timings["groups"] + time.perf_counter() - clock, 4)

    statistics = {
        "documents": int(n_docs),
        "documents_no_terms": int((status == NO_TERMS).sum()),
        "documents_isolated": int((status == ISOLATED).sum()),
        "duplicates": int(copies.size),
        "vertices": int(n_v),
        "vocabulary": int(weighting.vocabulary.size),
        **graph_statistics(knn, geo),
        "groups": len(groups),
        "seconds": timings,
    }
    return CorpusMap(
        vocabulary=weighting.vocabulary,
        idf=weighting.idf,
        tfidf=X,
        status=status,
        duplicate_of=duplicate_of,
        vertex=vertex,
        vertex_doc=vertex_doc,
        knn_indices=knn.indices.astype(np.int32),
        knn_distances=knn.distances.astype(np.float32),
        sigma=geo.affinity.sigma,
        component=geo.component,
        eigenvalues=geo.eigenvalues,
        psi=geo.psi,
        pi=geo.pi,
        degrees=geo.degrees,
        n_coordinates=geo.n_coordinates,
        smallest_eigenvalue=np.array([dm.smallest_eigenvalue for dm in geo.maps]),
        alpha_degree_sum=np.array([float(dm.alpha_degrees.sum()) for dm in geo.maps]),
        sigma_floor=float(geo.affinity.sigma_floor),
        group=group,
        groups=groups,
        statistics=statistics,
    )


def _summaries(
    counts: sp.csr_matrix,
    columns: np.ndarray,
    group: np.ndarray,
    vertex_group: np.ndarray,
    vertex_doc: np.ndarray,
    centres: list[tuple[np.ndarray, np.ndarray, np.ndarray]],
    component: np.ndarray,
    params: MapParams,
) -> list[GroupSummary]:
    labelled = np.flatnonzero(group >= 0)
    if labelled.size == 0:
        return []
    terms = distinguishing_terms(counts[labelled], group[labelled], n_terms=params.n_label_terms)
    sizes = np.bincount(group[labelled], minlength=len(centres))
    out = []
    for g, (members, coords, centre) in enumerate(centres):
        in_group = vertex_group[members] == g
        local = representatives(
            coords[in_group],
            np.zeros(int(in_group.sum()), dtype=np.int64),
            centre[None, :],
            n=params.n_representatives,
        )[0]
        reps = vertex_doc[members[np.flatnonzero(in_group)[local]]]
        out.append(
            GroupSummary(
                label=g,
                component=int(component[members[0]]),
                size=int(sizes[g]),
                terms=[(int(columns[s.term]), float(s.z), int(s.count)) for s in terms[g]],
                representatives=[int(r) for r in reps],
            )
        )
    return out
