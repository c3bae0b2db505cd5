"""Synthetic affinity graphs shaped like a text archive, for measuring spectral solvers.

The graphs are invented and serve measurement only, never as a check of correctness.
They reproduce what makes real short-text graphs hard for eigen-solvers: many topics of
very unequal size (so the top of the spectrum clusters just below 1) and tight groups of
near-duplicates (which attach to the rest by a few weak edges and push eigenvalues even
closer to 1).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from sklearn.neighbors import NearestNeighbors

from service.geometry.types import FloatArray, RngLike, as_generator


def clustered_points(
    n: int,
    *,
    dim: int = 12,
    n_topics: int | None = None,
    intrinsic_dim: int = 5,
    duplicate_fraction: float = 0.15,
    separation: float = 1.2,
    duplicate_spread: float = 0.02,
    rng: RngLike = 0,
) -> tuple[FloatArray, np.ndarray]:
    """Points in topics of skewed size with embedded groups of near-duplicates.

    Parameters
    ----------
    n : int
        Number of points.
    dim : int, default 12
        Ambient dimension.
    n_topics : int or None, default None
        Number of topics; ``max(20, n // 400)`` when None.
    intrinsic_dim : int, default 5
        Each topic is a Gaussian on a random ``intrinsic_dim``-dimensional subspace plus
        a little isotropic noise, like documents that vary along a few themes.
    duplicate_fraction : float, default 0.15
        Share of points that belong to a near-duplicate group (sizes 2 to 60, geometric
        with mean about 6).
    duplicate_spread : float, default 0.02
        Spread of a near-duplicate group relative to its topic's scale. At the defaults
        the top of the spectrum clusters like that of real short texts: at 100,000
        points the 40 leading non-trivial eigenvalues of the alpha = 1 diffusion
        operator lie within 2e-4 of 1.
    separation : float, default 1.2
        Standard deviation of the topic centres (topic scales are 0.5 to 1.5).
    rng : int or numpy.random.Generator, default 0
        Seed or generator.

    Returns
    -------
    points : ndarray of shape (n, dim)
    topic : ndarray of shape (n,)
        Topic index of every point.
    """
    gen = as_generator(rng)
    n_topics = max(20, n // 400) if n_topics is None else n_topics
    # Zipf-like topic sizes: a few large topics and a long tail of small ones.
    weights = 1.0 / np.arange(1, n_topics + 1) ** 1.1
    sizes = np.maximum(gen.multinomial(n, weights / weights.sum()), 1)
    sizes[0] += n - sizes.sum()
    centres = gen.normal(scale=separation, size=(n_topics, dim))
    scales = gen.uniform(0.5, 1.5, size=n_topics)
    points = np.empty((n, dim))
    topic = np.repeat(np.arange(n_topics), sizes)
    start = 0
    for t, size in enumerate(sizes):
        basis, _ = np.linalg.qr(gen.normal(size=(dim, intrinsic_dim)))
        latent = gen.normal(size=(size, intrinsic_dim)) * scales[t]
        noise = gen.normal(scale=0.05 * scales[t], size=(size, dim))
        points[start : start + size] = centres[t] + latent @ basis.T + noise
        start += size
    # Near-duplicate groups: overwrite runs of points with tiny perturbations of one seed.
    n_dup = int(duplicate_fraction * n)
    order = gen.permutation(n)
    used = 0
    while used < n_dup:
        size = int(min(60, 1 + gen.geometric(1 / 6)))
        members = order[used : used + size]
        if members.size < 2:
            break
        seed_point = points[members[0]]
        spread = duplicate_spread * scales[topic[members[0]]]
        points[members] = seed_point + gen.normal(scale=spread, size=(members.size, dim))
        topic[members] = topic[members[0]]
        used += members.size
    return points, topic


def self_tuning_knn_graph(points: FloatArray, k: int = 15) -> sp.csr_matrix:
    """Symmetric self-tuning Gaussian k-NN affinity (Zelnik-Manor & Perona 2004).

    Parameters
    ----------
    points : ndarray of shape (n, dim)
    k : int, default 15
        Neighbours per point; sigma_i is the distance to the k-th one.

    Returns
    -------
    W : scipy.sparse.csr_matrix of shape (n, n)
        ``w_ij = exp(-d_ij^2 / (sigma_i sigma_j))`` on the union of the k-NN relations,
        zero diagonal, float64.
    """
    n = points.shape[0]
    nn = NearestNeighbors(n_neighbors=k + 1).fit(points)
    dist, idx = nn.kneighbors(points)
    dist, idx = dist[:, 1:], idx[:, 1:]
    # Floor sigma: exact duplicates would give sigma = 0 and 0/0 weights.
    sigma = np.maximum(dist[:, -1], 1e-12)
    rows = np.repeat(np.arange(n), k)
    cols = idx.ravel()
    vals = np.exp(-(dist.ravel() ** 2) / (sigma[rows] * sigma[cols]))
    W = sp.csr_matrix((vals, (rows, cols)), shape=(n, n))
    # The weight formula is symmetric, so the union of both directions is the maximum.
    W = W.maximum(W.T).tocsr()
    W.setdiag(0.0)
    W.eliminate_zeros()
    W.sort_indices()
    return W


def largest_component(W: sp.csr_matrix) -> sp.csr_matrix:
    """The sub-matrix of ``W`` on its largest connected component."""
    from scipy.sparse.csgraph import connected_components

    _, labels = connected_components(W, directed=False)
    keep = np.flatnonzero(labels == np.bincount(labels).argmax())
    return W[keep][:, keep].tocsr()


def benchmark_graph(n: int, *, k: int = 15, rng: RngLike = 0) -> sp.csr_matrix:
    """Largest component of a self-tuning k-NN graph over :func:`clustered_points`.

    At ``n = 10_000, 30_000, 100_000`` (seed 0) the component has 9,719, 30,000 and
    99,961 nodes and about 20 stored entries per row.
    """
    points, _ = clustered_points(n, rng=rng)
    return largest_component(self_tuning_knn_graph(points, k))
