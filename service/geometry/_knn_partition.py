"""Approximate cosine k-NN by partitioning: cluster coarsely, search exactly nearby.

Implementation notes
--------------------
This is the inverted-file scheme of approximate search (Sivic & Zisserman 2003;
Jégou, Douze & Schmid 2011) with an exact sparse re-ranking, specialised to
TF-IDF rows:

1. A coarse map of the collection: an LSA projection (truncated SVD of a sample of
   rows, Deerwester et al. 1990) to a few dozen dimensions, and k-means on it. The
   projection is used only to *partition*; every reported similarity is the exact
   sparse cosine. (A graph built on LSA vectors themselves loses many true
   neighbours of short texts; a coarse partition does not need that precision.)
2. Every cluster ``c`` is compared with its ``probes`` nearest clusters (by centroid
   cosine, ``c`` itself included). For each unordered pair of clusters that is
   compared, the sparse product of their members is computed exactly once and used
   in both directions: rows give candidates to the members of ``c``, columns give
   candidates to the members of the other cluster. The symmetric use is what fixes
   most documents whose neighbours lie outside their own cluster's probes.
3. Candidates are merged into one (n, k) table of int64 keys (see ``_topk``), so
   the result is deterministic for a given ``rng`` whatever the thread timing.

The cost is the number of document pairs compared, about
``n**2 * probes / n_clusters`` times a balance factor, against ``n**2`` for exact
search; ``scipy``'s sparse product releases the GIL, so cluster pairs are spread
over a thread pool.
"""

from __future__ import annotations

from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import scipy.sparse as sp
from sklearn.cluster import KMeans
from sklearn.utils.extmath import randomized_svd

from service.geometry._topk import EMPTY_KEY, block_top_keys, merge_keys
from service.geometry.types import Float32Array, IntArray

#: Bytes held per entry of a dense similarity block while it is reduced to top-k
#: (float32 block, boolean/int64 temporaries of argpartition and the sparse product).
BYTES_PER_ENTRY = 40

_Task = tuple[int, int, int, IntArray]  # cluster, row start, row stop, column positions


def partitioned_keys(
    X: sp.csr_matrix,
    k: int,
    *,
    n_clusters: int,
    probes: int,
    dim: int,
    sample_size: int,
    memory_budget_bytes: int,
    n_jobs: int,
    seed: int,
) -> IntArray:
    """Top-k keys of every row of ``X`` by partitioned search (trusts its caller).

    ``X`` is CSR float32 with unit rows, ``k < X.shape[0]``. Returns an (n, k)
    int64 key table in the encoding of ``_topk``.
    """
    n = X.shape[0]
    gen = np.random.default_rng(seed)
    labels, centroids = _coarse_partition(X, n_clusters, dim, sample_size, gen)
    n_clusters = centroids.shape[0]
    order = np.argsort(labels, kind="stable")
    sizes = np.bincount(labels, minlength=n_clusters)
    starts = np.concatenate([[0], np.cumsum(sizes)])
    Xs = X[order]
    partners = _partners(centroids, sizes, probes, k)

    table = np.full((n, k), EMPTY_KEY, dtype=np.int64)
    tasks = list(_tasks(partners, starts, memory_budget_bytes // max(n_jobs, 1)))

    def run(task: _Task) -> tuple[IntArray, IntArray, IntArray, IntArray]:
        c, lo, hi, cols = task
        block = (Xs[lo:hi] @ Xs[cols].T.tocsr()).toarray()
        own = starts[c + 1] - starts[c]
        # Columns [0, own) are cluster c itself, in order: mask each row's own column.
        local = np.arange(hi - lo)
        block[local, lo - starts[c] + local] = -np.inf
        row_keys = block_top_keys(block, order[cols], k)
        col_keys = block_top_keys(np.ascontiguousarray(block[:, own:].T), order[lo:hi], k)
        return order[lo:hi], row_keys, order[cols[own:]], col_keys

    with ThreadPoolExecutor(max_workers=n_jobs) as pool:
        # map() yields in submission order, so the merges happen in a fixed order;
        # the key encoding makes the result independent of that order anyway.
        for rows, row_keys, other, col_keys in pool.map(run, tasks):
            merge_keys(table, rows, row_keys)
            if other.size:
                merge_keys(table, other, col_keys)
    return table


def _coarse_partition(
    X: sp.csr_matrix, n_clusters: int, dim: int, sample_size: int, gen: np.random.Generator
) -> tuple[IntArray, Float32Array]:
    """Cluster labels of all rows and unit centroids, from k-means on a sample's LSA."""
    n = X.shape[0]
    n_clusters = max(1, min(n_clusters, n))
    sample = np.sort(gen.choice(n, size=min(n, max(sample_size, 20 * n_clusters)), replace=False))
    dim = max(1, min(dim, min(X[sample].shape) - 1))
    # Components from the sample only: the projection is a coarse map, and fitting
    # it on every row would cost more than the search it guides.
    _, _, vt = randomized_svd(
        X[sample], dim, n_iter=4, random_state=int(gen.integers(2**31 - 1))
    )
    Y = _unit_rows(np.asarray(X @ vt.astype(np.float32).T))
    km = KMeans(
        n_clusters=min(n_clusters, sample.size),
        n_init=1,
        max_iter=30,
        random_state=int(gen.integers(2**31 - 1)),
    ).fit(Y[sample])
    centroids = _unit_rows(km.cluster_centers_.astype(np.float32))
    labels = np.empty(n, dtype=np.int64)
    step = 8192
    for a in range(0, n, step):
        labels[a : a + step] = np.argmax(Y[a : a + step] @ centroids.T, axis=1)
    # Drop clusters that received no member so every cluster is non-empty.
    used, labels = np.unique(labels, return_inverse=True)
    return labels.astype(np.int64), centroids[used]


def _unit_rows(Y: Float32Array) -> Float32Array:
    norms = np.linalg.norm(Y, axis=1, keepdims=True)
    return (Y / np.maximum(norms, np.finfo(np.float32).tiny)).astype(np.float32)


def _partners(centroids: Float32Array, sizes: IntArray, probes: int, k: int) -> list[IntArray]:
    """For every cluster c, the clusters c' > c whose members are compared with c's.

    c' is a partner when either cluster is among the other's ``probes`` nearest
    centroids. Probe lists are lengthened until they hold at least ``k + 1``
    documents, so every document has at least k candidates besides itself.
    """
    n_clusters = centroids.shape[0]
    sim = centroids @ centroids.T
    np.fill_diagonal(sim, np.inf)  # a cluster is always its own first probe
    ranked = np.argsort(-sim, axis=1, kind="stable")
    linked = np.zeros((n_clusters, n_clusters), dtype=bool)
    for c in range(n_clusters):
        reach = np.cumsum(sizes[ranked[c]])
        depth = max(min(probes, n_clusters), int(np.searchsorted(reach, k + 1)) + 1)
        linked[c, ranked[c, :depth]] = True
    linked |= linked.T
    return [np.flatnonzero(linked[c, c + 1 :]) + c + 1 for c in range(n_clusters)]


def _tasks(partners: list[IntArray], starts: IntArray, budget: int) -> Iterator[_Task]:
    """Row chunks of every cluster against the cluster itself and its partners."""
    for c, others in enumerate(partners):
        clusters = np.concatenate([[c], others])
        cols = np.concatenate([np.arange(starts[j], starts[j + 1]) for j in clusters])
        rows_per_chunk = max(1, budget // (BYTES_PER_ENTRY * max(cols.size, 1)))
        for lo in range(starts[c], starts[c + 1], rows_per_chunk):
            yield c, lo, min(lo + rows_per_chunk, starts[c + 1]), cols
