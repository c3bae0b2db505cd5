"""Neighbour search in diffusion coordinates checked against scikit-learn.

Reference: sklearn.neighbors.NearestNeighbors (brute force, Euclidean), on the UCI
optical digits bundled with scikit-learn (sklearn.datasets.load_digits).
"""

from __future__ import annotations

import numpy as np
from sklearn.datasets import load_digits
from sklearn.neighbors import NearestNeighbors

from service.geometry.coordinate_index import HnswSearch
from service.geometry.nearest import ExactSearch


def test_exact_and_hnsw_search_agree_with_sklearn_on_digits() -> None:
    X = load_digits().data.astype(np.float64)
    reference = NearestNeighbors(n_neighbors=10, algorithm="brute").fit(X)
    _, truth = reference.kneighbors(X[:300])
    exact = ExactSearch(X)
    index = HnswSearch(X)
    exact_hits = hnsw_hits = 0
    for i in range(300):
        want = set(truth[i].tolist())
        exact_hits += len(want & set(exact.search(X[i], 10)[0].tolist()))
        hnsw_hits += len(want & set(index.search(X[i], 10)[0].tolist()))
    # Exact search can differ from sklearn only on ties at the 10th distance (pixels are
    # integers, so equal distances occur).
    assert exact_hits / 3000 >= 0.99
    assert hnsw_hits / 3000 >= 0.95, hnsw_hits / 3000
