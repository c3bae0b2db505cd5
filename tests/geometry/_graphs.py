"""Small analytic and invented graphs for the geometry tests."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from service.bench.graphs import clustered_points, largest_component, self_tuning_knn_graph


def random_knn_graph(n: int, seed: int = 0, k: int = 10) -> sp.csr_matrix:
    """Connected self-tuning k-NN graph over clustered points (invented, for invariants)."""
    points, _ = clustered_points(n, dim=6, n_topics=5, duplicate_fraction=0.05, rng=seed)
    return largest_component(self_tuning_knn_graph(points, k))


def path_graph(n: int) -> sp.csr_matrix:
    off = np.ones(n - 1)
    return sp.diags([off, off], [-1, 1], format="csr")


def cycle_graph(n: int) -> sp.csr_matrix:
    W = path_graph(n).tolil()
    W[0, n - 1] = W[n - 1, 0] = 1.0
    return W.tocsr()
