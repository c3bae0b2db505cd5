"""Search indexes over a version's diffusion coordinates, built once with the version.

Related documents are the nearest points in diffusion coordinates. Components of at
least ``INDEXED_MIN_VERTICES`` vertices are searched through an HNSW index
(service.geometry.coordinate_index), smaller ones by the exact scan. The index is built
by the build worker at the collection's diffusion time, its recall measured against the
exact scan, and both stored with the version's arrays; API processes read it back
(about 15 ms for 56,000 vertices, against 1.6-2.6 s to build it). Built by every API
process after it loaded a version, as before, that work ran beside the very queries it
was meant to speed up, which fell back to the exact scan meanwhile: at 100,000
documents it was still building 16 s after the load under a 32-connection load.

A version made before this (no stored index) or a query at another t is still served:
see service.pipeline.query_search.search_structure.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray

from service.geometry.coordinate_index import HnswSearch, component_coordinates, measure_recall
from service.geometry.nearest import ExactSearch

__all__ = [
    "CANDIDATE_MARGIN",
    "INDEXED_MIN_VERTICES",
    "build_coordinate_indexes",
    "index_array_name",
    "stored_index",
    "trimmed_eigenvalues",
]

# At 45,469 vertices x 40 coordinates the exact float64 scan costs 1.0-1.2 ms per query
# and HNSW 0.08 ms with recall@10 0.98-0.99 from the 27 candidates asked (bench-query's
# 100k collection, measured on this machine); below 20,000 the scan costs under ~0.5 ms.
INDEXED_MIN_VERTICES = 20_000
# Candidates asked beyond k: the query's own row, rows hidden since the build, and slack
# for the exact re-ranking of the answers.
CANDIDATE_MARGIN = 17
RECALL_K = 10

RECALL_ARRAY = "coordinate_index_recall"  # (n_components,) float64, NaN where none
T_ARRAY = "coordinate_index_t"  # (1,) the diffusion time the coordinates are scaled for


def index_array_name(c: int) -> str:
    return f"coordinate_index_{c}"


def trimmed_eigenvalues(row: NDArray[np.floating]) -> NDArray[np.float64]:
    """A component's stored eigenvalues, trivial one first, zero padding removed."""
    lam = np.asarray(row, dtype=np.float64)
    width = int(np.count_nonzero(lam)) or 1
    return lam[:width]


def build_coordinate_indexes(
    arrays: Mapping[str, np.ndarray],
    t: float,
    *,
    threads: int = 2,
    min_vertices: int | None = None,
    progress: Callable[[float], None] | None = None,
) -> tuple[dict[str, np.ndarray], list[dict[str, Any]]]:
    """The stored indexes of a version's large components, from its arrays (``psi``,
    ``component``, ``eigenvalues``, ``n_coordinates``): new arrays to store beside them,
    and one statistics entry per index (component, vertices, recall, seconds)."""
    least = INDEXED_MIN_VERTICES if min_vertices is None else min_vertices
    component = np.asarray(arrays["component"])
    n_coordinates = np.asarray(arrays["n_coordinates"])
    n_comp = int(n_coordinates.size)
    sizes = np.bincount(component[component >= 0], minlength=n_comp)
    large = [c for c in range(n_comp) if sizes[c] >= least and int(n_coordinates[c]) > 0]
    out: dict[str, np.ndarray] = {}
    stats: list[dict[str, Any]] = []
    recall = np.full(n_comp, np.nan)
    for done, c in enumerate(large):
        started = time.perf_counter()
        members = np.flatnonzero(component == c)  # ascending, as QueryView.members
        lam = trimmed_eigenvalues(arrays["eigenvalues"][c])
        psi = np.ascontiguousarray(arrays["psi"][members, : lam.size])
        points = component_coordinates(psi, lam, t, int(n_coordinates[c]))
        index = HnswSearch(points, threads=threads)
        recall[c] = measure_recall(
            index, ExactSearch(points), k=RECALL_K, candidates=RECALL_K + CANDIDATE_MARGIN
        )
        out[index_array_name(c)] = index.to_bytes()
        stats.append(
            {
                "component": c,
                "vertices": int(members.size),
                "recall": round(float(recall[c]), 4),
                "seconds": round(time.perf_counter() - started, 2),
            }
        )
        if progress is not None:
            progress((done + 1) / len(large))
    if large:
        out[RECALL_ARRAY] = recall
        out[T_ARRAY] = np.array([float(t)])
    return out, stats


def stored_index(
    arrays: Mapping[str, np.ndarray], c: int, t: float, points: int, dimension: int
) -> tuple[HnswSearch, float] | None:
    """The version's stored index of component ``c`` and its measured recall, when there
    is one for this ``t`` that fits the component (``points`` x ``dimension``)."""
    data = arrays.get(index_array_name(c))
    stored_t = arrays.get(T_ARRAY)
    if data is None or stored_t is None or float(np.asarray(stored_t).ravel()[0]) != float(t):
        return None
    index = HnswSearch.from_bytes(data)
    if index.size != points or index.dimension != dimension:
        return None
    return index, float(np.asarray(arrays[RECALL_ARRAY])[c])
