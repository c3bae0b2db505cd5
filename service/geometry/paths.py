"""Why two documents are related: the most probable chain of documents linking them.

Functions
---------
transition_matrix
    The Markov matrix ``P = D^-1 K_alpha`` of the diffusion map, from a symmetric
    affinity matrix and the density-normalisation exponent ``alpha``.
most_probable_path
    The walk from one document to another whose step probabilities have the largest
    product: a shortest path with edge costs ``-log p_ij``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from service.geometry.types import FloatArray, IntArray

__all__ = ["Path", "most_probable_path", "transition_matrix"]

# Row sums of a transition matrix may differ from 1 by accumulated rounding; a
# float32-built matrix is off by ~1e-7.
_ROW_SUM_TOLERANCE = 1e-6

# Relative asymmetry accepted in an affinity matrix (rounding in its symmetrisation).
_SYMMETRY_TOLERANCE = 1e-10

# scipy's sparse graph routines have treated stored zeros as edges in some versions and
# as missing edges in others; a step of probability 1 (cost -log 1 = 0) is therefore
# given the smallest positive cost instead, which no sum of costs can notice.
_MIN_COST = np.finfo(np.float64).tiny

# scipy.sparse.csgraph marks "no predecessor" with this value.
_NO_PREDECESSOR = -9999


# eq=False: fields are arrays, and a generated __eq__ would compare them elementwise.
@dataclass(frozen=True, eq=False)
class Path:
    """A chain of documents from a source to a target.

    Attributes
    ----------
    nodes : IntArray, shape (n_steps + 1,)
        Document indices from source to target, both included.
    step_probabilities : FloatArray, shape (n_steps,)
        Transition probability ``P[a, b]`` of each step ``a -> b``.
    probability : float
        Product of the step probabilities (1 for a path of no steps). May underflow
        to 0 for very long improbable paths; `log_probability` does not.
    log_probability : float
        Sum of the logarithms of the step probabilities.
    """

    nodes: IntArray
    step_probabilities: FloatArray
    probability: float
    log_probability: float

    @property
    def n_steps(self) -> int:
        """Number of steps (edges) in the path."""
        return int(self.step_probabilities.size)


def transition_matrix(W: sp.spmatrix | sp.sparray, alpha: float) -> sp.csr_matrix:
    """Row-stochastic Markov matrix of the alpha-normalised diffusion kernel.

    Parameters
    ----------
    W : scipy.sparse matrix, shape (n, n)
        Symmetric non-negative affinity matrix (any sparse format).
    alpha : float
        Density-normalisation exponent in ``[0, 1]``: 0 is the normalised graph
        Laplacian's random walk, 1/2 the Fokker-Planck scaling, 1 removes the
        influence of sampling density (the Laplace-Beltrami case).

    Returns
    -------
    scipy.sparse.csr_matrix of float64, shape (n, n)
        ``P`` with rows summing to 1, except the all-zero rows of isolated vertices
        (degree 0), which stay zero: such a vertex has nowhere to go. Canonical
        format (sorted indices, no stored zeros).

    Raises
    ------
    ValueError
        If `W` is not square, symmetric, finite and non-negative, or `alpha` lies
        outside ``[0, 1]``.

    Notes
    -----
    Coifman & Lafon (2006, section 2.1): with degrees ``q_i = sum_j W_ij`` form
    ``K_alpha = Q^-alpha W Q^-alpha`` (``Q = diag(q)``), its degrees ``d_i = sum_j
    (K_alpha)_ij``, and ``P = D^-1 K_alpha``. ``P`` is reversible with stationary
    distribution ``pi_i = d_i / sum_j d_j``.

    References
    ----------
    .. [1] R. R. Coifman and S. Lafon, "Diffusion maps", Applied and Computational
       Harmonic Analysis 21(1), 5-30, 2006.

    Examples
    --------
    >>> import numpy as np
    >>> import scipy.sparse as sp
    >>> W = sp.csr_matrix(np.array([[0.0, 1.0, 0.0], [1.0, 0.0, 3.0], [0.0, 3.0, 0.0]]))
    >>> transition_matrix(W, 0.0).toarray().tolist()
    [[0.0, 1.0, 0.0], [0.25, 0.0, 0.75], [0.0, 1.0, 0.0]]
    """
    if not (sp.issparse(W) and W.ndim == 2 and W.shape[0] == W.shape[1]):
        raise ValueError(f"W must be a square scipy sparse matrix, got {getattr(W, 'shape', W)}")
    if not (np.isfinite(alpha) and 0.0 <= alpha <= 1.0):
        raise ValueError(f"alpha must be in [0, 1], got {alpha}")
    w = sp.csr_matrix(W, dtype=np.float64, copy=True)
    w.sum_duplicates()
    w.eliminate_zeros()
    if w.nnz and (not np.all(np.isfinite(w.data)) or w.data.min() < 0):
        raise ValueError("W must be finite and non-negative")
    asymmetry = abs(w - w.T).max() if w.nnz else 0.0
    scale = w.data.max() if w.nnz else 0.0
    if asymmetry > _SYMMETRY_TOLERANCE * scale:
        raise ValueError(f"W must be symmetric, got max |W - W.T| = {asymmetry:.3g}")

    q = np.asarray(w.sum(axis=1)).ravel()
    q_pow = _safe_power(q, -alpha)
    k = sp.diags_array(q_pow) @ w @ sp.diags_array(q_pow)
    d = np.asarray(k.sum(axis=1)).ravel()
    p = sp.csr_matrix(sp.diags_array(_safe_power(d, -1.0)) @ k)
    p.eliminate_zeros()
    p.sort_indices()
    return p


def _safe_power(values: FloatArray, exponent: float) -> FloatArray:
    """``values ** exponent`` where ``values > 0``, else 0 (isolated vertices)."""
    out = np.zeros_like(values)
    positive = values > 0
    out[positive] = values[positive] ** exponent
    return out


def most_probable_path(P: sp.spmatrix | sp.sparray, source: int, target: int) -> Path | None:
    """Most probable walk from `source` to `target` under the transition matrix `P`.

    Parameters
    ----------
    P : scipy.sparse matrix, shape (n, n)
        Row-stochastic transition matrix (entries in ``[0, 1]``, each row summing to
        1 or, for an isolated vertex, 0), e.g. from `transition_matrix`.
    source, target : int
        Document indices in ``[0, n)``.

    Returns
    -------
    Path or None
        The path maximising ``prod_steps P[a, b]``; ``None`` when `target` cannot be
        reached from `source` (different connected components). For ``source ==
        target`` the path has one node, no steps and probability 1.

    Raises
    ------
    ValueError
        If `P` is not a square row-stochastic sparse matrix or an index is out of
        range.

    Notes
    -----
    Maximising a product of probabilities is minimising ``sum -log P[a, b]``, a sum
    of non-negative edge costs, so Dijkstra's algorithm (Dijkstra 1959) finds it
    exactly, as implemented by ``scipy.sparse.csgraph.dijkstra`` on the directed
    graph (``P`` is not symmetric). The optimum is a simple path (a cycle only
    multiplies in probabilities ``<= 1``). Steps of probability exactly 1 get the
    cost ``2.2e-308`` instead of 0 (see `_MIN_COST`), which breaks exact ties in
    favour of fewer steps and changes nothing else. scipy offers no stop at a
    target, so the search covers the source's whole component (about 0.13 s for
    100k documents with 15 neighbours each, measured).

    ``P[a, b]`` is the one-step probability of the diffusion map's random walk, so
    the path is the chain of documents a walker most probably follows; with the
    kernel it is a chain of strongly similar documents.

    References
    ----------
    .. [1] E. W. Dijkstra, "A note on two problems in connexion with graphs",
       Numerische Mathematik 1, 269-271, 1959.

    Examples
    --------
    >>> import numpy as np
    >>> import scipy.sparse as sp
    >>> P = sp.csr_matrix(np.array([[0.0, 0.5, 0.5], [0.9, 0.0, 0.1], [0.2, 0.8, 0.0]]))
    >>> path = most_probable_path(P, 0, 2)
    >>> path.nodes.tolist(), round(path.probability, 3)
    ([0, 2], 0.5)
    """
    p = _checked_transition(P)
    n = p.shape[0]
    for name, index in (("source", source), ("target", target)):
        if not 0 <= index < n:
            raise ValueError(f"{name} must be in [0, {n}), got {index}")
    if source == target:
        return Path(
            nodes=np.array([source], dtype=np.int64),
            step_probabilities=np.zeros(0, dtype=np.float64),
            probability=1.0,
            log_probability=0.0,
        )
    cost = p.copy()
    cost.data = np.maximum(-np.log(cost.data), _MIN_COST)
    _, predecessors = dijkstra(cost, directed=True, indices=source, return_predecessors=True)
    if predecessors[target] == _NO_PREDECESSOR:
        return None
    nodes = _walk_back(predecessors, source, target)
    steps = np.asarray(p[nodes[:-1], nodes[1:]], dtype=np.float64).ravel()
    log_probability = float(np.sum(np.log(steps)))
    return Path(
        nodes=nodes,
        step_probabilities=steps,
        probability=float(np.prod(steps)),
        log_probability=log_probability,
    )


def _checked_transition(P: sp.spmatrix | sp.sparray) -> sp.csr_matrix:
    """Canonical float64 CSR copy of a validated row-stochastic matrix."""
    if not (sp.issparse(P) and P.ndim == 2 and P.shape[0] == P.shape[1]):
        raise ValueError(f"P must be a square scipy sparse matrix, got {getattr(P, 'shape', P)}")
    p = sp.csr_matrix(P, dtype=np.float64, copy=True)
    p.sum_duplicates()
    p.eliminate_zeros()
    if p.nnz and (
        not np.all(np.isfinite(p.data)) or p.data.min() < 0 or p.data.max() > 1 + _ROW_SUM_TOLERANCE
    ):
        raise ValueError("P must hold finite probabilities in [0, 1]")
    sums = np.asarray(p.sum(axis=1)).ravel()
    bad = np.flatnonzero((sums != 0) & (np.abs(sums - 1.0) > _ROW_SUM_TOLERANCE))
    if bad.size:
        raise ValueError(
            f"P must be row-stochastic; row {bad[0]} sums to {float(sums[bad[0]]):.12g} "
            f"({bad.size} rows off)"
        )
    return p


def _walk_back(predecessors: IntArray, source: int, target: int) -> IntArray:
    """Node sequence source..target from a Dijkstra predecessor array."""
    reversed_nodes = [target]
    node = target
    while node != source:
        node = int(predecessors[node])
        reversed_nodes.append(node)
    return np.array(reversed_nodes[::-1], dtype=np.int64)
