"""Connected components of an affinity graph, split into mappable parts and isolated nodes."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from service.geometry.types import IntArray

__all__ = ["Components", "split_components"]


@dataclass(frozen=True)
class Components:
    """Connected components of an affinity graph.

    Attributes
    ----------
    labels : ndarray of int64, shape (n,)
        Component index of every node, as numbered by
        :func:`scipy.sparse.csgraph.connected_components` (a zero-degree row is its
        own component).
    mapped : list of ndarray of int64
        Sorted member indices of every component with at least ``min_size`` nodes and
        positive degrees, ordered by size (largest first), ties by smallest member.
    isolated : ndarray of int64, shape (n_isolated,)
        Sorted indices of the nodes in smaller components and of every zero-degree node.
    """

    labels: IntArray
    mapped: list[IntArray]
    isolated: IntArray


def split_components(W: sp.spmatrix | sp.sparray, min_size: int) -> Components:
    """Split a symmetric affinity graph into its connected components.

    Parameters
    ----------
    W : scipy sparse matrix of shape (n, n)
        Symmetric non-negative affinities. Only the pattern of positive entries counts
        (explicitly stored zeros are ignored); the diagonal is ignored, so a node
        whose only weight is a self-loop counts as zero-degree.
    min_size : int
        Smallest component that is worth a diffusion map; members of smaller
        components are reported in ``isolated``. At least 1.

    Returns
    -------
    Components
        ``mapped`` lists the large components, ``isolated`` everything else, so that
        every node appears exactly once in ``mapped`` or ``isolated``.

    Raises
    ------
    ValueError
        If ``W`` is not square or ``min_size`` < 1.

    Notes
    -----
    The stationary distribution of the random walk on a disconnected graph is not
    unique and its spectrum has eigenvalue 1 once per component (Chung 1997,
    *Spectral Graph Theory*, Lemma 1.7), so a diffusion map is computed per component.
    A node whose row sums to zero has no random walk at all (its degree would be
    divided by), hence it is always isolated, even when ``min_size`` is 1.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> W = sp.csr_matrix([[0, 1, 0, 0], [1, 0, 0, 0], [0, 0, 0, 0], [0, 0, 0, 0.0]])
    >>> c = split_components(W, min_size=2)
    >>> [m.tolist() for m in c.mapped], c.isolated.tolist()
    ([[0, 1]], [2, 3])
    """
    if W.ndim != 2 or W.shape[0] != W.shape[1]:
        raise ValueError(f"W must be a square matrix, got shape {W.shape}")
    if min_size < 1:
        raise ValueError(f"min_size must be at least 1, got {min_size}")
    n = W.shape[0]
    pattern = sp.csr_matrix(W, dtype=np.float64, copy=True)
    pattern.setdiag(0.0)
    pattern.data = (pattern.data > 0).astype(np.float64)
    pattern.eliminate_zeros()
    _, raw = connected_components(pattern, directed=False)
    labels = raw.astype(np.int64)
    # Off-diagonal degree: a self-loop alone gives no walk to any other node.
    degree = np.asarray(pattern.sum(axis=1)).ravel()
    if n == 0:
        return Components(labels, [], np.empty(0, dtype=np.int64))
    order = np.argsort(labels, kind="stable")
    starts = np.flatnonzero(np.r_[True, labels[order][1:] != labels[order][:-1]])
    groups = np.split(order, starts[1:])
    mapped: list[IntArray] = []
    isolated: list[IntArray] = []
    for members in groups:
        members = np.sort(members).astype(np.int64)
        if members.size >= min_size and np.all(degree[members] > 0):
            mapped.append(members)
        else:
            isolated.append(members)
    mapped.sort(key=lambda m: (-m.size, int(m[0])))
    iso = np.sort(np.concatenate(isolated)) if isolated else np.empty(0, dtype=np.int64)
    return Components(labels=labels, mapped=mapped, isolated=iso.astype(np.int64))
