"""The most probable chain between two sets of graph vertices, on a prepared cost graph.

`service.geometry.paths.most_probable_path` validates ``P`` and takes ``-log`` of it on
every call (60-80 ms for 100,000 vertices with 15 neighbours each, measured); a
query service keeps the cost graph once per index version and searches it here.

Functions
---------
walk_costs
    Edge costs ``-log P[a, b]`` of a transition matrix, sharing its sparsity structure.
without_vertices
    The cost graph with every edge *into* a set of vertices removed.
cheapest_chain
    Dijkstra's search from weighted sources to weighted targets: the walk of largest
    probability when sources and targets are reached by extra steps of known cost.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from service.geometry.types import BoolArray, FloatArray, IntArray

__all__ = ["MIN_COST", "Chain", "cheapest_chain", "walk_costs", "without_vertices"]

# A step of probability 1 costs -log 1 = 0, and scipy's sparse graph routines have
# treated stored zeros as missing edges in some versions; the smallest positive float
# takes its place (the same rule as service.geometry.paths).
MIN_COST = float(np.finfo(np.float64).tiny)

# scipy.sparse.csgraph marks "no predecessor" with this value.
_NO_PREDECESSOR = -9999


@dataclass(frozen=True, eq=False)
class Chain:
    """A cheapest chain: its vertices from a source to a target, both included.

    Attributes
    ----------
    nodes : IntArray, shape (n_steps + 1,)
        Vertices of the graph; ``nodes[0]`` is one of the sources, ``nodes[-1]`` one of
        the targets (the same vertex when a source is a target).
    cost : float
        Source cost + the edge costs along the chain + target cost.
    """

    nodes: IntArray
    cost: float


def walk_costs(P: sp.csr_matrix) -> sp.csr_matrix:
    """``-log P`` on the stored entries of a canonical CSR transition matrix.

    Parameters
    ----------
    P : scipy.sparse.csr_matrix, shape (n, n)
        Entries in (0, 1], no stored zeros (e.g. `service.geometry.paths.transition_matrix`).

    Returns
    -------
    scipy.sparse.csr_matrix of float64
        Same ``indices`` and ``indptr`` arrays as `P` (shared, not copied); costs of
        steps of probability 1 are `MIN_COST` instead of 0.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> c = walk_costs(sp.csr_matrix(np.array([[0.0, 1.0], [0.5, 0.5]])))
    >>> np.round(c.toarray(), 3).tolist()
    [[0.0, 0.0], [0.693, 0.693]]
    """
    if not (sp.issparse(P) and P.format == "csr" and P.shape[0] == P.shape[1]):
        raise ValueError(f"P must be a square CSR matrix, got {getattr(P, 'shape', P)}")
    data = np.asarray(P.data, dtype=np.float64)
    if data.size and (not np.all(np.isfinite(data)) or data.min() <= 0 or data.max() > 1 + 1e-9):
        raise ValueError("P must store probabilities in (0, 1] only")
    cost = np.maximum(-np.log(data), MIN_COST)
    return sp.csr_matrix((cost, P.indices, P.indptr), shape=P.shape, copy=False)


def without_vertices(cost: sp.csr_matrix, forbidden: BoolArray) -> sp.csr_matrix:
    """The cost graph without the edges that step onto a forbidden vertex.

    Parameters
    ----------
    cost : scipy.sparse.csr_matrix, shape (n, n)
    forbidden : BoolArray, shape (n,)

    Returns
    -------
    scipy.sparse.csr_matrix
        A new matrix (one pass over the edges); the other edges keep their costs.
        The forbidden vertices' own rows stay, but nothing leads to them, so a search
        that does not start on one never uses them.
    """
    mask = np.asarray(forbidden, dtype=bool)
    if mask.shape != (cost.shape[0],):
        raise ValueError(f"forbidden must have shape ({cost.shape[0]},), got {mask.shape}")
    keep = ~mask[cost.indices]
    kept_before = np.zeros(keep.size + 1, dtype=np.int64)
    np.cumsum(keep, out=kept_before[1:])
    indptr = kept_before[cost.indptr]
    return sp.csr_matrix(
        (cost.data[keep], cost.indices[keep], indptr), shape=cost.shape, copy=False
    )


def cheapest_chain(
    cost: sp.csr_matrix,
    sources: IntArray,
    source_costs: FloatArray,
    targets: IntArray,
    target_costs: FloatArray,
) -> Chain | None:
    """The chain minimising source cost + edge costs + target cost.

    Parameters
    ----------
    cost : scipy.sparse.csr_matrix, shape (n, n)
        Non-negative directed edge costs, e.g. from `walk_costs`.
    sources, targets : IntArray
        Candidate first and last vertices.
    source_costs, target_costs : FloatArray
        Cost of entering each source (of stepping from an outside point onto it) and of
        leaving each target; 0 for a plain vertex.

    Returns
    -------
    Chain or None
        None when no target can be reached from any source.

    Notes
    -----
    Dijkstra's algorithm (Dijkstra 1959; ``scipy.sparse.csgraph.dijkstra``) on the
    directed graph. Several sources are joined by an extra vertex ``n`` with edges of
    the source costs (a copy of the edge arrays, a few milliseconds at 100,000 vertices);
    the target costs are added to the distances found. scipy offers no stop at a target,
    so one search covers the source's whole connected component. Measured
    (``python -m service.bench.path_latency``, 100,000 invented documents, 15
    neighbours): 15 ms median (20 ms max) on the largest component, 42,000 vertices;
    42 ms median (59 ms max) on a random 15-NN graph of 100,000 vertices in one
    component; 18 / 54 ms from ~20 weighted sources. Small enough not to need a
    bidirectional or distance-limited search.

    References
    ----------
    .. [1] E. W. Dijkstra, "A note on two problems in connexion with graphs",
       Numerische Mathematik 1, 269-271, 1959.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> c = sp.csr_matrix(np.array([[0, 1.0, 5.0], [0, 0, 1.0], [0, 0, 0]]))
    >>> chain = cheapest_chain(c, np.array([0]), np.zeros(1), np.array([2]), np.zeros(1))
    >>> chain.nodes.tolist(), chain.cost
    ([0, 1, 2], 2.0)
    """
    n = cost.shape[0]
    src = np.asarray(sources, dtype=np.int64)
    dst = np.asarray(targets, dtype=np.int64)
    src_cost = np.asarray(source_costs, dtype=np.float64)
    dst_cost = np.asarray(target_costs, dtype=np.float64)
    for name, idx, weights in (("sources", src, src_cost), ("targets", dst, dst_cost)):
        if idx.ndim != 1 or idx.size == 0 or weights.shape != idx.shape:
            raise ValueError(f"{name} and their costs must be equal-length non-empty 1-D arrays")
        if idx.min() < 0 or idx.max() >= n:
            raise ValueError(f"{name} must lie in [0, {n})")
        if not np.all(np.isfinite(weights)) or weights.min() < 0:
            raise ValueError(f"the costs of the {name} must be finite and non-negative")
    if src.size == 1 and src_cost[0] == 0.0:
        graph, start = cost, int(src[0])
    else:
        graph, start = _with_super_source(cost, src, src_cost), n
    distances, predecessors = dijkstra(
        graph, directed=True, indices=start, return_predecessors=True
    )
    totals = distances[dst] + dst_cost
    best = int(np.argmin(totals))
    if not np.isfinite(totals[best]):
        return None
    nodes = _walk_back(predecessors, start, int(dst[best]))
    if start == n:
        nodes = nodes[1:]
    return Chain(nodes=nodes, cost=float(totals[best]))


def _with_super_source(cost: sp.csr_matrix, sources: IntArray, costs: FloatArray) -> sp.csr_matrix:
    """``cost`` with one more vertex ``n`` whose edges lead to the sources (cheapest entry
    kept when a source is listed twice)."""
    n = cost.shape[0]
    order = np.lexsort((costs, sources))
    first = np.ones(order.size, dtype=bool)
    first[1:] = sources[order][1:] != sources[order][:-1]
    heads, entry = sources[order][first], np.maximum(costs[order][first], MIN_COST)
    indptr = np.append(np.asarray(cost.indptr, dtype=np.int64), cost.nnz + heads.size)
    return sp.csr_matrix(
        (
            np.concatenate([cost.data, entry]),
            np.concatenate([cost.indices, heads.astype(cost.indices.dtype)]),
            indptr,
        ),
        shape=(n + 1, n + 1),
    )


def _walk_back(predecessors: IntArray, start: int, end: int) -> IntArray:
    """Vertices start..end from a Dijkstra predecessor array."""
    reversed_nodes = [end]
    node = end
    while node != start:
        node = int(predecessors[node])
        if node == _NO_PREDECESSOR:
            raise RuntimeError("broken predecessor chain")  # cannot happen: end was reached
        reversed_nodes.append(node)
    return np.array(reversed_nodes[::-1], dtype=np.int64)
