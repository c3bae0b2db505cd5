"""Exact and indexed nearest-neighbour search in diffusion coordinates."""

from __future__ import annotations

import numpy as np

from service.geometry.coordinate_index import HnswSearch, measure_recall
from service.geometry.nearest import ExactSearch, top_k_smallest


def _points(n: int = 3000, m: int = 12, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    centres = rng.normal(size=(8, m))
    return centres[rng.integers(0, 8, n)] + 0.2 * rng.normal(size=(n, m))


def test_top_k_smallest_orders_by_value_then_index() -> None:
    values = np.array([3.0, 1.0, 2.0, 1.0, 0.5])
    assert top_k_smallest(values, 3).tolist() == [4, 1, 3]
    assert top_k_smallest(values, 10).tolist() == [4, 1, 3, 2, 0]
    assert top_k_smallest(values, 0).size == 0


def test_exact_search_matches_a_full_sort() -> None:
    points = _points()
    search = ExactSearch(points)
    for row in (0, 17, 2999):
        idx, d2 = search.search(points[row], 15)
        full = ((points - points[row]) ** 2).sum(axis=1)
        assert idx[0] == row
        assert np.allclose(d2, np.sort(full)[:15], atol=1e-4)
        assert set(idx.tolist()) == set(np.argsort(full, kind="stable")[:15].tolist())


def test_hnsw_search_recall_against_exact() -> None:
    points = _points(5000)
    exact = ExactSearch(points)
    index = HnswSearch(points)
    recall = measure_recall(index, exact, k=10, sample=200)
    assert recall >= 0.97, recall
    idx, d2 = index.search(points[5], 10)
    assert idx[0] == 5 and d2[0] < 1e-6
    assert np.all(np.diff(d2) >= -1e-6)


def test_hnsw_search_with_k_above_ef_search() -> None:
    points = _points(2000)
    index = HnswSearch(points)
    idx, _ = index.search(points[0], 150)
    assert idx.size == 150 and len(set(idx.tolist())) == 150
