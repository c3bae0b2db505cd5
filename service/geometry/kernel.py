r"""Self-tuning Gaussian affinities on a k-NN graph.

Functions
---------
bandwidth
    The local scale sigma of one point from its sorted neighbour distances (the
    one rule used both for the indexed documents and for a new text).
self_tuning_affinity
    The symmetric sparse affinity matrix of a `KnnGraph`.
kernel_weights
    Affinities of a new point to indexed documents (for the Nyström extension).

Notes
-----
Zelnik-Manor & Perona (2004) replace the single Gaussian width by a local one:

.. math::

    w_{ij} = \exp\!\left(-\frac{d_{ij}^2}{\sigma_i \sigma_j}\right), \qquad
    \sigma_i = d(x_i, x_{i,(k)}),

the distance from point i to its k-th nearest neighbour, so dense and sparse
regions get comparable affinities.

References
----------
L. Zelnik-Manor and P. Perona, "Self-tuning spectral clustering", Advances in
Neural Information Processing Systems 17, 2004.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from service.geometry.knn import KnnGraph
from service.geometry.types import FloatArray

__all__ = [
    "SIGMA_FLOOR_FRACTION",
    "AffinityGraph",
    "bandwidth",
    "kernel_weights",
    "self_tuning_affinity",
]

#: Default floor of the bandwidth, as a fraction of the median positive sigma.
SIGMA_FLOOR_FRACTION = 0.01


@dataclass(frozen=True)
class AffinityGraph:
    """Symmetric affinities of a k-NN graph and the bandwidths that made them.

    Attributes
    ----------
    weights : scipy.sparse.csr_matrix of float64, shape (n, n)
        Symmetric, zero diagonal, every stored entry in (0, 1].
    sigma : FloatArray, shape (n,)
        Bandwidth of every point after the floor, all ``>= sigma_floor > 0``.
    sigma_floor : float
        The floor that was applied; a new point's bandwidth must use the same one.
    """

    weights: sp.csr_matrix
    sigma: FloatArray
    sigma_floor: float


def bandwidth(distances_sorted_row: FloatArray, k: int, floor: float = 0.0) -> float:
    """Local scale of one point: the distance to its k-th neighbour, at least `floor`.

    Parameters
    ----------
    distances_sorted_row : FloatArray, shape (m,)
        Distances to the point's nearest neighbours, ascending, itself excluded,
        ``m >= k``.
    k : int
        Which neighbour sets the scale (1-based: ``k=1`` is the nearest).
    floor : float, default 0.0
        Lower bound; pass `AffinityGraph.sigma_floor` for a new point.

    Returns
    -------
    float
        ``max(distances_sorted_row[k - 1], floor)``.

    Examples
    --------
    >>> bandwidth(np.array([0.1, 0.3, 0.4]), 2)
    0.3
    >>> bandwidth(np.array([0.0, 0.0]), 2, floor=0.05)
    0.05
    """
    row = np.asarray(distances_sorted_row, dtype=np.float64)
    if row.ndim != 1:
        raise ValueError(f"distances_sorted_row must be 1-D, got shape {row.shape}")
    return float(_bandwidths(row[None, :], k, floor)[0])


def self_tuning_affinity(graph: KnnGraph, *, sigma_floor: float | None = None) -> AffinityGraph:
    r"""Self-tuning Gaussian affinity matrix of a k-NN graph.

    Parameters
    ----------
    graph : KnnGraph
        Neighbours and ascending distances (cosine or Euclidean), self excluded.
    sigma_floor : float or None, default None
        Smallest allowed bandwidth. None means ``SIGMA_FLOOR_FRACTION`` (0.01)
        times the median of the positive raw bandwidths (1.0 if none is
        positive, i.e. every distance is zero).

    Returns
    -------
    AffinityGraph
        Weights, floored bandwidths and the floor.

    Notes
    -----
    ``sigma_i = max(d_{i,(k)}, floor)`` with k the graph's k (see `bandwidth`)
    and ``w_ij = exp(-d_ij^2 / (sigma_i sigma_j))`` for every j in the k-NN list
    of i (Zelnik-Manor & Perona 2004).

    *Floor.* A point with at least k exact copies has ``d_{i,(k)} = 0``; without a
    floor its row would be 0/0 for the copies and 0 for everything else. One
    hundredth of the median positive sigma keeps the row finite while leaving
    ordinary points untouched; exact copies should be collapsed first anyway
    (`service.geometry.duplicates`).

    *Symmetrisation.* The k-NN relation is not symmetric; the matrix keeps an
    edge when either point is among the other's k neighbours and takes
    ``max(w_ij, w_ji)`` (the union of the two relations, the usual choice for
    spectral methods; the intersection would isolate points in sparse regions).
    Where both directions exist the two values agree up to rounding, because the
    formula is symmetric in i and j.

    An affinity that underflows to 0.0 (``d^2 / (sigma_i sigma_j) > ~745``) is not
    stored, so every stored weight is positive; the diagonal is zero.

    Examples
    --------
    >>> from service.geometry.knn import euclidean_knn
    >>> g = euclidean_knn(np.array([[0.0], [1.0], [2.0], [4.0]]), 1)
    >>> a = self_tuning_affinity(g)
    >>> a.sigma.tolist()
    [1.0, 1.0, 1.0, 2.0]
    >>> print(np.round(a.weights.toarray(), 3))
    [[0.    0.368 0.    0.   ]
     [0.368 0.    0.368 0.   ]
     [0.    0.368 0.    0.135]
     [0.    0.    0.135 0.   ]]
    """
    idx, dist = graph.indices, np.asarray(graph.distances, dtype=np.float64)
    n, k = idx.shape
    if dist.shape != (n, k) or k < 1:
        raise ValueError(f"graph indices {idx.shape} and distances {dist.shape} must match")
    if np.any(idx == np.arange(n)[:, None]):
        raise ValueError("graph lists a point as its own neighbour")
    if np.any(idx < 0) or np.any(idx >= n):
        raise ValueError(f"graph indices must lie in [0, {n}), got [{idx.min()}, {idx.max()}]")
    if not np.all(np.isfinite(dist)) or dist.min() < 0:
        raise ValueError("graph distances must be finite and non-negative")
    raw = dist[:, k - 1]
    if sigma_floor is None:
        positive = raw[raw > 0]
        sigma_floor = SIGMA_FLOOR_FRACTION * float(np.median(positive)) if positive.size else 1.0
    elif not sigma_floor > 0:
        raise ValueError(f"sigma_floor must be positive, got {sigma_floor}")
    sigma = _bandwidths(dist, k, sigma_floor)
    w = np.exp(-(dist**2) / (sigma[:, None] * sigma[idx]))
    directed = sp.csr_matrix((w.ravel(), idx.ravel(), np.arange(0, n * k + 1, k)), shape=(n, n))
    weights = directed.maximum(directed.T).tocsr()
    weights.setdiag(0.0)
    weights.eliminate_zeros()
    weights.sort_indices()
    return AffinityGraph(weights=weights, sigma=sigma, sigma_floor=float(sigma_floor))


def kernel_weights(
    distances: FloatArray, sigma_x: float, sigma_neighbors: FloatArray
) -> FloatArray:
    """Self-tuning affinities of one new point to indexed points.

    Parameters
    ----------
    distances : FloatArray, shape (m,)
        Distances from the new point to m indexed points.
    sigma_x : float
        The new point's bandwidth, from `bandwidth` with the graph's k and
        `AffinityGraph.sigma_floor`.
    sigma_neighbors : FloatArray, shape (m,)
        `AffinityGraph.sigma` of those m points.

    Returns
    -------
    FloatArray, shape (m,)
        ``exp(-d_j^2 / (sigma_x sigma_j))``, the same formula as the graph.

    Examples
    --------
    >>> np.round(kernel_weights(np.array([0.0, 1.0]), 1.0, np.array([1.0, 2.0])), 4).tolist()
    [1.0, 0.6065]
    """
    d = np.asarray(distances, dtype=np.float64)
    s = np.asarray(sigma_neighbors, dtype=np.float64)
    if d.ndim != 1 or d.shape != s.shape:
        raise ValueError(
            "distances and sigma_neighbors must be 1-D of equal length, "
            f"got {d.shape} and {s.shape}"
        )
    if not sigma_x > 0 or (s.size and s.min() <= 0):
        raise ValueError(
            f"bandwidths must be positive, got sigma_x={sigma_x}, "
            f"smallest neighbour sigma {s.min(initial=1.0)}"
        )
    return np.exp(-(d**2) / (sigma_x * s))


def _bandwidths(dist: FloatArray, k: int, floor: float) -> FloatArray:
    """Row-wise ``max(dist[:, k - 1], floor)``: the single bandwidth rule."""
    if not 1 <= k <= dist.shape[1]:
        raise ValueError(f"k must satisfy 1 <= k <= {dist.shape[1]} distances, got {k}")
    if floor < 0:
        raise ValueError(f"floor must be non-negative, got {floor}")
    return np.maximum(dist[:, k - 1], floor)
