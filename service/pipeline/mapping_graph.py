"""The chain after the k-NN step: kernel, components, diffusion maps, coordinates, groups.

Shared by `service.pipeline.mapping.map_corpus` (cosine k-NN of TF-IDF rows) and
`map_points` (Euclidean k-NN of dense points, the reference point clouds of
tests/external), so those checks run the code the service runs.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import scipy.sparse as sp

from service.geometry.clustering import choose_n_groups, cluster_coordinates
from service.geometry.components import Components, split_components
from service.geometry.diffusion import (
    DiffusionMap,
    choose_n_coordinates,
    diffusion_coordinates,
    diffusion_map,
)
from service.geometry.kernel import AffinityGraph, self_tuning_affinity
from service.geometry.knn import KnnGraph, euclidean_knn

if TYPE_CHECKING:
    from service.pipeline.mapping import MapParams

ProgressFn = Callable[[str, float], None]


def no_progress(stage: str, fraction: float) -> None:
    return None


@dataclass(frozen=True)
class PointMap:
    """A map of ``n`` dense points (no text, no duplicates collapsed): `map_points`.

    Arrays mean what `CorpusMap`'s vertex arrays mean, with one vertex per point;
    ``diffusion_maps[c]`` is the diffusion map of mapped component ``c`` (what the
    Nystrom extension of a new point needs, with `sigma` and `sigma_floor`).
    """

    knn_indices: np.ndarray  # (n, k) int32, ascending distance
    knn_distances: np.ndarray  # (n, k) float64, Euclidean
    sigma: np.ndarray  # (n,) self-tuning bandwidths
    sigma_floor: float
    component: np.ndarray  # (n,) int32, -1 for isolated points
    eigenvalues: np.ndarray  # (C, m + 1) per mapped component, zero-padded
    psi: np.ndarray  # (n, m + 1)
    pi: np.ndarray  # (n,)
    degrees: np.ndarray  # (n,)
    n_coordinates: np.ndarray  # (C,) coordinates kept at the default t
    group: np.ndarray  # (n,) int64, -1 for isolated points
    diffusion_maps: tuple[DiffusionMap, ...]
    statistics: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class GraphGeometry:
    """Everything `map_graph` computes after the kNN step, on graph vertices."""

    affinity: AffinityGraph
    comps: Components
    maps: list[DiffusionMap]
    component: np.ndarray
    eigenvalues: np.ndarray
    psi: np.ndarray
    pi: np.ndarray
    degrees: np.ndarray
    n_coordinates: np.ndarray
    vertex_group: np.ndarray
    # (component members, their coordinates, the group's centre) per group, in label order
    centres: list[tuple[np.ndarray, np.ndarray, np.ndarray]]


def record_stage(timings: dict[str, float], name: str, start: float) -> float:
    now = time.perf_counter()
    timings[name] = round(now - start, 4)
    return now


def map_points(
    points: np.ndarray, params: MapParams, progress: ProgressFn = no_progress
) -> PointMap:
    """The map of dense points: exact Euclidean kNN, then the chain of `map_corpus`.

    The vocabulary, duplicate and label-term settings of ``params`` do not apply;
    every point is its own vertex (coincident points are kept apart by the sigma floor).
    Raises ValueError on fewer than 3 points or non-finite values.
    """
    pts = np.asarray(points, dtype=np.float64)
    if pts.ndim != 2 or pts.shape[0] < 3:
        raise ValueError(f"points must be 2-D with at least 3 rows, got shape {pts.shape}")
    timings: dict[str, float] = {}
    clock = time.perf_counter()
    progress("graph", 0.0)
    knn = euclidean_knn(pts, min(params.neighbors, pts.shape[0] - 1))
    geo = map_graph(knn, params, timings, clock, progress)
    return PointMap(
        knn_indices=knn.indices.astype(np.int32),
        knn_distances=knn.distances,
        sigma=geo.affinity.sigma,
        sigma_floor=geo.affinity.sigma_floor,
        component=geo.component,
        eigenvalues=geo.eigenvalues,
        psi=geo.psi,
        pi=geo.pi,
        degrees=geo.degrees,
        n_coordinates=geo.n_coordinates,
        group=geo.vertex_group,
        diffusion_maps=tuple(geo.maps),
        statistics={"points": int(pts.shape[0]), **graph_statistics(knn, geo), "seconds": timings},
    )


def graph_affinity(
    knn: KnnGraph, unrelated: float | None = None, sigma_floor: float | None = None
) -> AffinityGraph:
    """The self-tuning affinity of the k-NN graph, without edges at distance ``>= unrelated``.

    Pass ``unrelated=1.0`` for cosine graphs: see `_drop_unrelated`. ``sigma_floor``: a
    stored build's floor, to rebuild its graph (None: computed, as a build does).
    """
    affinity = self_tuning_affinity(knn, sigma_floor=sigma_floor)
    return affinity if unrelated is None else _drop_unrelated(affinity, knn, unrelated)


def map_graph(
    knn: KnnGraph,
    params: MapParams,
    timings: dict[str, float],
    clock: float,
    progress: ProgressFn,
    unrelated: float | None = None,
) -> GraphGeometry:
    """Kernel, components, one diffusion map per component, coordinates and groups.

    Pairs at distance ``>= unrelated`` get no edge (see `graph_affinity`).
    """
    affinity = graph_affinity(knn, unrelated)
    W = affinity.weights
    n_v = W.shape[0]
    clock = record_stage(timings, "graph", clock)

    progress("spectrum", 0.0)
    comps = split_components(W, params.min_component_size)
    n_pairs = params.max_coordinates + 2  # one past the kept ones bounds the truncation
    component = np.full(n_v, -1, dtype=np.int32)
    eigenvalues = np.zeros((len(comps.mapped), n_pairs))
    psi = np.zeros((n_v, n_pairs))
    pi = np.zeros(n_v)
    maps: list[DiffusionMap] = []
    for c, members in enumerate(comps.mapped):
        sub = W[members][:, members]
        dm = diffusion_map(sub, alpha=params.alpha, n_eigenpairs=n_pairs, rng=params.seed)
        maps.append(dm)
        width = dm.eigenvalues.size
        component[members] = c
        eigenvalues[c, :width] = dm.eigenvalues
        psi[members, :width] = dm.psi
        pi[members] = dm.pi
        progress("spectrum", (c + 1) / len(comps.mapped))
    degrees = np.asarray(W.sum(axis=1)).ravel()
    clock = record_stage(timings, "spectrum", clock)

    progress("groups", 0.0)
    t = params.diffusion_time
    n_coords = np.zeros(len(maps), dtype=np.int64)
    vertex_group = np.full(n_v, -1, dtype=np.int64)
    centres_by_group: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
    next_label = 0
    counts = _group_counts([m.size for m in comps.mapped], maps, params)
    for c, (members, dm) in enumerate(zip(comps.mapped, maps, strict=True)):
        n_coords[c] = choose_n_coordinates(
            dm.eigenvalues,
            t,
            threshold=params.coordinate_threshold,
            max_coordinates=params.max_coordinates,
        )
        coords = diffusion_coordinates(dm, t, int(n_coords[c]))
        n_groups = counts[c]
        labels = np.zeros(members.size, dtype=np.int64)
        if n_groups > 1:
            # k-means sees the n_groups - 1 leading coordinates only, the eigenvectors
            # above the gap that make n_groups groups (Ng, Jordan & Weiss 2001; von
            # Luxburg 2007, section 4). Measured (adjusted Rand index against the known
            # classes, t = 1, leading / all 40 coordinates; `python -m
            # tests.external.test_stdlib_docstrings --groups`, `... test_digits_uci
            # --groups`): stdlib docstrings, 20 groups, 0.59 / 0.48; UCI digits, 10
            # groups, 0.75 / 0.41; a blob inside a ring (test_circles_sklearn), 2
            # groups, 1.00 / 0.02. Later coordinates are mostly within-group variation,
            # which pulls k-means away from the gap's partition.
            lead = coords[:, : max(1, min(n_groups - 1, coords.shape[1]))]
            labels = cluster_coordinates(lead, n_groups, rng=params.seed).labels
        centres = _group_means(coords, labels)
        vertex_group[members] = labels + next_label
        for g in range(int(labels.max()) + 1):
            centres_by_group.append((members, coords, centres[g]))
        next_label += int(labels.max()) + 1
    record_stage(timings, "groups", clock)
    return GraphGeometry(
        affinity=affinity,
        comps=comps,
        maps=maps,
        component=component,
        eigenvalues=eigenvalues,
        psi=psi,
        pi=pi,
        degrees=degrees,
        n_coordinates=n_coords,
        vertex_group=vertex_group,
        centres=centres_by_group,
    )


def _drop_unrelated(affinity: AffinityGraph, knn: KnnGraph, limit: float) -> AffinityGraph:
    """The affinity without the edges of k-NN pairs at distance ``>= limit``.

    A document with fewer than k documents sharing a term with it still gets k
    "neighbours", the rest at cosine 0 (distance 1), and the self-tuning kernel gives
    them weight ``exp(-1 / (sigma_i sigma_j))``, up to 0.37: unrelated texts would be
    joined and a corpus of disjoint vocabularies would never fall into components (a
    small separate topic would be absorbed by a large one). Their sigma keeps its rule.
    """
    far = knn.distances >= limit
    if not far.any():
        return affinity
    n, k = knn.indices.shape
    rows = np.repeat(np.arange(n), k)[far.ravel()]
    cols = knn.indices[far]
    # d(i, j) = d(j, i), so the pair is dropped from both directions of the union.
    mask = sp.csr_matrix((np.ones(rows.size), (rows, cols)), shape=(n, n))
    W = affinity.weights - affinity.weights.multiply((mask + mask.T) > 0)
    W = sp.csr_matrix(W)
    W.eliminate_zeros()
    W.sort_indices()
    return replace(affinity, weights=W)


def graph_statistics(knn: KnnGraph, geo: GraphGeometry) -> dict[str, Any]:
    maps = geo.maps
    return {
        "edges": int(geo.affinity.weights.nnz // 2),
        "neighbors": int(knn.k),
        "knn_method": knn.method,
        "knn_recall": knn.recall,
        "components": [int(m.size) for m in geo.comps.mapped],
        "isolated_vertices": int(geo.comps.isolated.size),
        "eigenvalues": [float(v) for v in geo.eigenvalues[0]] if maps else [],
        "solvers": sorted({dm.solver for dm in maps}),
        "max_residual": float(max((dm.residuals.max() for dm in maps), default=0.0)),
        "coordinates": int(geo.n_coordinates[0]) if maps else 0,
        # Eigen-solver wall time per mapped component, largest first.
        "solver_seconds": [round(dm.seconds, 3) for dm in maps],
    }


def _group_counts(sizes: list[int], maps: list[DiffusionMap], params: MapParams) -> list[int]:
    """How many groups each mapped component is cut into; small components stay whole.

    A fixed ``n_groups`` is the number of groups of the whole map. The Markov matrix of
    a disconnected graph is block diagonal, so its spectrum is the union of the
    components' spectra, and the ``n_groups`` leading eigenvectors of the whole graph
    fall into component ``c`` as often as ``c`` has eigenvalues among the ``n_groups``
    largest of that union: that is its share. Every component keeps at least one group
    (no edge joins two components), so with fewer groups than components each
    component is one group. Without a fixed number, each component's own spectral gap
    decides (at least 2, at most ``max_groups``, ``size // 20`` and the pairs computed).
    """
    t = params.diffusion_time
    small = [size < params.min_clustered_size for size in sizes]
    if params.n_groups is None:
        return [
            1
            if small[c]
            else choose_n_groups(
                dm.eigenvalues,
                t,
                min_groups=2,
                max_groups=max(2, min(params.max_groups, sizes[c] // 20, dm.eigenvalues.size - 1)),
            )
            for c, dm in enumerate(maps)
        ]
    # Pool (lambda, component, index); a small component contributes only its lambda_0.
    pool = [
        (-float(lam), c, k)
        for c, dm in enumerate(maps)
        for k, lam in enumerate(dm.eigenvalues[: 1 if small[c] else sizes[c] // 2])
    ]
    pool.sort()
    counts = np.bincount([c for _, c, _ in pool[: params.n_groups]], minlength=len(maps))
    return [max(1, int(n)) for n in counts]


def _group_means(coords: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """Mean coordinates of each group 0..max(labels), in all kept coordinates."""
    n_groups = int(labels.max()) + 1
    sums = np.zeros((n_groups, coords.shape[1]))
    np.add.at(sums, labels, coords)
    return sums / np.bincount(labels, minlength=n_groups)[:, None]
