"""Latency of the path query's numerics on a large invented graph.

``python -m service.bench.path_latency [--docs 100000] [--pairs 50]``: synthetic counts
(service.bench.synthetic_text) weighted and linked as ``map_corpus`` does up to the k-NN
graph, stored as a build stores it (float32 distances), then the path query's steps:
rebuilding the walk once, one search per pair, the hidden-vertex mask, a provisional
source (several weighted sources). Also a random 15-NN graph of as many vertices (one
component, the worst case for a search that covers the component). Figures only, no
checks; the numbers are invented data and serve measurement.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable
from typing import Any

import numpy as np
from scipy.sparse.csgraph import connected_components

from service.bench.synthetic_text import synthetic_counts
from service.geometry.duplicates import exact_duplicate_groups
from service.geometry.knn import cosine_knn
from service.geometry.path_search import cheapest_chain, without_vertices
from service.geometry.paths import most_probable_path
from service.pipeline.mapping import MapParams
from service.pipeline.path_query import WalkGraph, walk_graph
from service.text.weighting import fit_tfidf


def _ms(fn: Callable[[], Any], repeat: int) -> tuple[float, float]:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return 1000 * float(np.median(times)), 1000 * float(np.max(times))


def text_graph(n_docs: int, params: MapParams) -> tuple[np.ndarray, np.ndarray]:
    """k-NN lists of the distinct texts of ``n_docs`` synthetic documents (as stored)."""
    counts, _ = synthetic_counts(n_docs, rng=0)
    weighting = fit_tfidf(
        counts, min_df=params.min_df, max_df=params.max_df, vocab_size=params.vocab_size
    )
    X = weighting.matrix
    kept = np.setdiff1d(np.arange(X.shape[0]), weighting.empty_rows)
    reps = kept[np.unique(exact_duplicate_groups(X[kept]))]
    knn = cosine_knn(X[reps], params.neighbors, method=params.knn_method, rng=params.seed)
    return knn.indices.astype(np.int32), knn.distances.astype(np.float32)


def random_graph(n: int, k: int, seed: int = 1) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    idx = rng.integers(0, n - 1, size=(n, k))
    idx = idx + (idx >= np.arange(n)[:, None])  # never itself
    dist = np.sort(rng.random((n, k)), axis=1) * 0.9  # cosine distances below 1
    return idx.astype(np.int32), dist.astype(np.float32)


def measure(name: str, walk: WalkGraph, n_pairs: int, seconds_walk: float) -> None:
    n = walk.P.shape[0]
    _, labels = connected_components(walk.P, directed=False)
    members = np.flatnonzero(labels == np.bincount(labels).argmax())
    rng = np.random.default_rng(0)
    pairs = [rng.choice(members, 2, replace=False) for _ in range(n_pairs)]
    one = np.zeros(1)

    times, steps = [], []
    for s, t in pairs:
        start = time.perf_counter()
        chain = cheapest_chain(walk.cost, np.array([s]), one, np.array([t]), one)
        times.append(time.perf_counter() - start)
        steps.append(0 if chain is None else chain.nodes.size - 1)
    print(
        f"{name}: {n} vertices, {walk.P.nnz} edges, largest component {members.size}; "
        f"walk rebuilt in {seconds_walk:.2f} s"
    )
    print(
        f"  search (one source): median {1000 * np.median(times):.1f} ms, "
        f"max {1000 * np.max(times):.1f} ms; steps median {int(np.median(steps))}"
    )
    s, t = pairs[0]
    med, worst = _ms(lambda: most_probable_path(walk.P, int(s), int(t)), 5)
    print(f"  geometry.paths.most_probable_path (validates P each call): median {med:.1f} ms")
    hidden = np.zeros(n, dtype=bool)
    hidden[rng.choice(n, n // 100, replace=False)] = True
    med, worst = _ms(lambda: without_vertices(walk.cost, hidden), 5)
    print(f"  mask of 1% hidden vertices (once per change): median {med:.1f} ms")
    sources = walk.P[s].indices
    costs = rng.random(sources.size) + 0.1
    med, worst = _ms(lambda: cheapest_chain(walk.cost, sources, costs, np.array([t]), one), 10)
    print(
        f"  search from {sources.size} weighted sources (provisional source): "
        f"median {med:.1f} ms, max {worst:.1f} ms"
    )


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--docs", type=int, default=100_000)
    parser.add_argument("--pairs", type=int, default=50)
    args = parser.parse_args(argv)
    params = MapParams()
    for name, make in (
        ("synthetic text", lambda: text_graph(args.docs, params)),
        ("random 15-NN", lambda: random_graph(args.docs, params.neighbors)),
    ):
        indices, distances = make()
        floor = 0.01 * float(np.median(distances[:, -1][distances[:, -1] > 0]))
        start = time.perf_counter()
        walk = walk_graph(indices, distances, floor, params.alpha)
        measure(name, walk, args.pairs, time.perf_counter() - start)


if __name__ == "__main__":
    main()
