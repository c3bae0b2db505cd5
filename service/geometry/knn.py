"""k nearest neighbours of documents by cosine similarity, and of points in space.

Functions
---------
cosine_knn
    The k-NN graph of L2-normalised TF-IDF rows: exact blockwise for small
    collections, partitioned approximate search with measured recall for large ones.
euclidean_knn
    Exact k-NN of dense points (reference point clouds in the tests).
recall_at_k
    Fraction of true neighbours an approximate graph found.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.sparse as sp
from sklearn.neighbors import NearestNeighbors

from service.geometry._knn_partition import BYTES_PER_ENTRY, partitioned_keys
from service.geometry._topk import block_top_keys, decode_keys, sort_keys
from service.geometry.types import FloatArray, IntArray, RngLike, as_generator

__all__ = ["EXACT_MAX_DOCS", "KnnGraph", "cosine_knn", "euclidean_knn", "recall_at_k"]

#: Largest collection that ``method="auto"`` searches exactly (see `cosine_knn`, Notes).
EXACT_MAX_DOCS = 12_000

_MiB = 1 << 20
_ROUNDS = 10  # at most this many second-hop rounds after the first pass
_LSA_DIM = 128  # dimensions of the coarse map that guides the partition
_LSA_SAMPLE = 10_000  # rows the coarse map is fitted on (k-means: twice as many)


@dataclass(frozen=True)
class KnnGraph:
    """The k nearest neighbours of every point.

    Attributes
    ----------
    indices : IntArray, shape (n, k)
        Neighbour indices of each point, the point itself excluded.
    distances : FloatArray, shape (n, k)
        Matching distances, ascending along each row; ties are ordered by index.
    method : {"exact", "approximate"}
        How the neighbours were found.
    recall : float or None
        For approximate graphs, recall@k measured against exact search on a random
        sample of rows (see `recall_at_k`); None for exact graphs or when no
        sample was requested.
    metric : {"cosine", "euclidean"}
        ``"cosine"`` means distance ``1 - cos``; ``"euclidean"`` the L2 distance.
    """

    indices: IntArray
    distances: FloatArray
    method: Literal["exact", "approximate"]
    recall: float | None
    metric: Literal["cosine", "euclidean"]

    @property
    def k(self) -> int:
        """Number of neighbours per point."""
        return int(self.indices.shape[1])


def cosine_knn(
    X: sp.spmatrix | sp.sparray,
    k: int,
    *,
    method: Literal["auto", "exact", "approximate"] = "auto",
    memory_budget_bytes: int = 512 * _MiB,
    n_jobs: int = 2,
    rng: RngLike = 0,
    recall_sample: int = 1000,
    probes: int = 6,
    docs_per_cluster: int = 60,
) -> KnnGraph:
    r"""k-NN graph of documents under the cosine distance ``d = 1 - cos``.

    Parameters
    ----------
    X : sparse matrix, shape (n_docs, n_terms)
        TF-IDF rows with unit L2 norm (as from `service.text.weighting.fit_tfidf`);
        converted to CSR float32. All-zero rows are rejected: remove them first.
    k : int
        Number of neighbours, ``1 <= k < n_docs``.
    method : {"auto", "exact", "approximate"}, default "auto"
        ``"auto"`` is exact up to `EXACT_MAX_DOCS` documents, approximate above.
    memory_budget_bytes : int, default 512 MiB
        Memory allowed for the dense similarity blocks of all threads together;
        the block height follows from it.
    n_jobs : int, default 2
        Threads. scipy's sparse matrix product releases the GIL, so threads run
        the blocks in parallel (measured: 8 blocks of 1,000 x 10,000 took 2.5 s of
        CPU in 1.4 s of wall time on 2 cores, against 3.4 s serially).
    rng : int or numpy.random.Generator, default 0
        Seed of the approximate search's partition and of the recall sample.
    recall_sample : int, default 1000
        Approximate search only: rows whose exact neighbours are computed to
        measure recall@k (0 skips the check and leaves ``recall=None``).

    Returns
    -------
    KnnGraph
        ``metric="cosine"``; distances ``1 - cos`` clipped to [0, 2].

    Other Parameters
    ----------------
    probes : int, default 6
        Approximate search: number of nearest clusters each cluster is compared with.
    docs_per_cluster : int, default 60
        Approximate search: target cluster size of the coarse partition.

    Raises
    ------
    ValueError
        On a non-2-D input, zero rows, rows that are not unit length, or a bad
        ``k``, ``method``, budget or thread count.

    Notes
    -----
    Exact search computes blocks ``S = X_B X^T`` (sparse product, then dense;
    block height ``budget / (n_jobs * 40 bytes * n_docs)``), masks each row's own
    column and keeps the k largest cosines, ties broken by the lower index. Its
    cost grows as ``n_docs**2`` (about 18 million pairs per second per core on
    ~120-term rows). The approximate search (``_knn_partition``) compares only
    the documents of pairs of clusters that a coarse map and the graph itself
    point to, always with exact sparse cosines, so only the *set* of neighbours
    is approximate, never a reported distance. `EXACT_MAX_DOCS` is where the two
    take about the same time on invented ~1 KB documents
    (``python -m service.bench.knn_measure``: 10,000 documents 3.8 s exact / 5.8 s
    approximate, 20,000 documents 11.2 s / 6.0 s).

    The reported `KnnGraph.recall` is measured, not assumed: ``recall_sample``
    random rows are searched exactly (one more blockwise product, about
    ``recall_sample / n_docs`` of the cost of an exact graph) and compared with
    `recall_at_k`.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> X = sp.csr_matrix(np.array([[1.0, 0, 0], [0.8, 0.6, 0], [0, 0.6, 0.8], [0, 0, 1.0]]))
    >>> g = cosine_knn(X, 1)
    >>> g.indices.ravel().tolist(), np.round(g.distances.ravel(), 2).tolist()
    ([1, 0, 3, 2], [0.2, 0.2, 0.2, 0.2])
    """
    csr = _check_unit_rows(X)
    n = csr.shape[0]
    if not 1 <= k < n:
        raise ValueError(f"k must satisfy 1 <= k < n_docs={n}, got {k}")
    if method not in ("auto", "exact", "approximate"):
        raise ValueError(f"method must be 'auto', 'exact' or 'approximate', got {method!r}")
    if memory_budget_bytes < _MiB:
        raise ValueError(f"memory_budget_bytes must be at least 1 MiB, got {memory_budget_bytes}")
    if n_jobs < 1:
        raise ValueError(f"n_jobs must be >= 1, got {n_jobs}")
    if recall_sample < 0:
        raise ValueError(f"recall_sample must be >= 0, got {recall_sample}")
    # One probe links no cluster to another, and the second-hop rounds can only
    # grow from links that exist: at least two.
    if probes < 2 or docs_per_cluster < 1:
        raise ValueError(
            f"probes must be >= 2 and docs_per_cluster >= 1, got {probes} and {docs_per_cluster}"
        )
    gen = as_generator(rng)
    if method == "exact" or (method == "auto" and n <= EXACT_MAX_DOCS):
        keys = _exact_keys(csr, np.arange(n), k, memory_budget_bytes, n_jobs)
        return _graph(keys, "exact", None)
    keys = partitioned_keys(
        csr,
        k,
        n_clusters=max(1, round(n / docs_per_cluster)),
        probes=probes,
        rounds=_ROUNDS,
        round_probes=max(2, probes // 2),
        dim=_LSA_DIM,
        sample_size=_LSA_SAMPLE,
        memory_budget_bytes=memory_budget_bytes,
        n_jobs=n_jobs,
        seed=int(gen.integers(2**63 - 1)),
    )
    graph = _graph(keys, "approximate", None)
    if recall_sample == 0:
        return graph
    rows = np.sort(gen.choice(n, size=min(recall_sample, n), replace=False))
    exact = decode_keys(sort_keys(_exact_keys(csr, rows, k, memory_budget_bytes, n_jobs)))[0]
    recall = recall_at_k(graph.indices[rows], exact)
    return KnnGraph(graph.indices, graph.distances, "approximate", recall, "cosine")


def euclidean_knn(points: FloatArray, k: int) -> KnnGraph:
    """Exact k-NN of dense points under the Euclidean distance.

    Parameters
    ----------
    points : FloatArray, shape (n, d)
        Finite coordinates.
    k : int
        Number of neighbours, ``1 <= k < n``.

    Returns
    -------
    KnnGraph
        ``method="exact"``, ``metric="euclidean"``, ties ordered by index.

    Examples
    --------
    >>> import numpy as np
    >>> g = euclidean_knn(np.array([[0.0], [1.0], [3.0], [7.0]]), 1)
    >>> g.indices.ravel().tolist(), g.distances.ravel().tolist()
    ([1, 0, 1, 2], [1.0, 1.0, 2.0, 4.0])
    """
    pts = np.asarray(points, dtype=np.float64)
    if pts.ndim != 2:
        raise ValueError(f"points must be 2-D (n, d), got shape {pts.shape}")
    n = pts.shape[0]
    if not 1 <= k < n:
        raise ValueError(f"k must satisfy 1 <= k < n={n}, got {k}")
    if not np.all(np.isfinite(pts)):
        raise ValueError("points contain NaN or infinite values")
    # Ask for k + 1 and drop the point itself rather than trusting it to come
    # first (duplicates tie with it at distance 0); then sort by (distance, index).
    dist, idx = NearestNeighbors(n_neighbors=min(k + 1, n)).fit(pts).kneighbors(pts)
    own = idx == np.arange(n)[:, None]
    keep = np.where(own.any(axis=1)[:, None], ~own, np.arange(idx.shape[1]) < k)
    idx = idx[keep].reshape(n, k)
    dist = dist[keep].reshape(n, k)
    order = np.lexsort((idx, dist), axis=1)
    return KnnGraph(
        np.take_along_axis(idx, order, axis=1).astype(np.int64),
        np.take_along_axis(dist, order, axis=1),
        "exact",
        None,
        "euclidean",
    )


def recall_at_k(approx: IntArray, exact: IntArray) -> float:
    """Mean fraction of each row's exact neighbours found by the approximate search.

    Parameters
    ----------
    approx, exact : IntArray, shape (n_rows, k)
        Neighbour indices of the same rows, in any order within a row.

    Returns
    -------
    float
        ``mean_i |approx_i ∩ exact_i| / k``, in [0, 1].

    Examples
    --------
    >>> import numpy as np
    >>> recall_at_k(np.array([[1, 2], [0, 3]]), np.array([[2, 1], [0, 2]]))
    0.75
    """
    a, e = np.asarray(approx), np.asarray(exact)
    if a.ndim != 2 or a.shape != e.shape or a.shape[1] == 0:
        raise ValueError(f"approx and exact must be equal 2-D shapes, got {a.shape} and {e.shape}")
    # Shift every row into its own integer range so one isin() tests row by row.
    offset = (np.arange(a.shape[0], dtype=np.int64) * (max(a.max(), e.max()) + 1))[:, None]
    hits = np.isin(a + offset, e + offset).sum()
    return float(hits / e.size)


def _check_unit_rows(X: sp.spmatrix | sp.sparray) -> sp.csr_matrix:
    """CSR float32 copy of X after checking shape, zero rows and unit norms."""
    if not sp.issparse(X):
        raise ValueError(f"X must be a scipy sparse matrix, got {type(X).__name__}")
    if X.ndim != 2:
        raise ValueError(f"X must be 2-D, got shape {X.shape}")
    csr = sp.csr_matrix(X, dtype=np.float32, copy=True)
    csr.sum_duplicates()
    csr.eliminate_zeros()
    n_empty = int(np.count_nonzero(np.diff(csr.indptr) == 0))
    if n_empty:
        raise ValueError(
            f"X has {n_empty} all-zero row(s) (documents with no kept term); "
            "remove them before building the graph"
        )
    norms = np.sqrt(
        np.bincount(
            np.repeat(np.arange(csr.shape[0]), np.diff(csr.indptr)),
            weights=csr.data.astype(np.float64) ** 2,
            minlength=csr.shape[0],
        )
    )
    bad = np.abs(norms - 1.0) > 1e-4
    if bad.any():
        raise ValueError(
            f"X rows must have unit L2 norm; {int(bad.sum())} row(s) do not "
            f"(norms range {norms.min():.6g} to {norms.max():.6g})"
        )
    return csr


def _exact_keys(X: sp.csr_matrix, rows: IntArray, k: int, budget: int, n_jobs: int) -> IntArray:
    """Exact top-k keys of ``rows`` against all rows of X, blockwise over threads."""
    n = X.shape[0]
    XT = X.T.tocsr()
    block = max(1, min(rows.size, budget // (n_jobs * BYTES_PER_ENTRY * n)))
    cols = np.arange(n, dtype=np.int64)

    def run(a: int) -> IntArray:
        r = rows[a : a + block]
        sim = (X[r] @ XT).toarray()
        sim[np.arange(r.size), r] = -np.inf
        return block_top_keys(sim, cols, k)

    with ThreadPoolExecutor(max_workers=n_jobs) as pool:
        parts = list(pool.map(run, range(0, rows.size, block)))
    return np.concatenate(parts, axis=0)


def _graph(
    keys: IntArray, method: Literal["exact", "approximate"], recall: float | None
) -> KnnGraph:
    idx, sim = decode_keys(sort_keys(keys))
    return KnnGraph(idx, np.clip(1.0 - sim, 0.0, 2.0), method, recall, "cosine")
