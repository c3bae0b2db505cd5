"""Exact and indexed nearest-neighbour search in diffusion coordinates."""

from __future__ import annotations

import numpy as np
import pytest

from service.geometry.coordinate_index import HnswSearch, measure_recall
from service.geometry.nearest import ExactSearch, top_k_largest, top_k_smallest


def _points(n: int = 3000, m: int = 12, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    centres = rng.normal(size=(8, m))
    return centres[rng.integers(0, 8, n)] + 0.2 * rng.normal(size=(n, m))


def test_top_k_smallest_orders_by_value_then_index() -> None:
    values = np.array([3.0, 1.0, 2.0, 1.0, 0.5])
    assert top_k_smallest(values, 3).tolist() == [4, 1, 3]
    assert top_k_smallest(values, 10).tolist() == [4, 1, 3, 2, 0]
    assert top_k_smallest(values, 0).size == 0


def _full_sort(values: np.ndarray, k: int, largest: bool) -> list[int]:
    key = -values if largest else values
    return np.lexsort((np.arange(values.size), key))[:k].tolist()


@pytest.mark.parametrize("largest", [False, True])
@pytest.mark.parametrize("shape", ["distinct", "coarse", "mostly_zero", "constant"])
@pytest.mark.parametrize("n", [1, 37, 4096, 99_069])
def test_top_k_matches_a_full_stable_sort(largest: bool, shape: str, n: int) -> None:
    # n = 99,069 takes the blocked threshold path (>= 4 groups of 128 per wanted value);
    # coarse and constant values put ties at the k-th place, where index order decides.
    rng = np.random.default_rng(n)
    values = rng.random(n)
    if shape == "coarse":
        values = np.round(values * 4) / 4
    elif shape == "mostly_zero":
        values[rng.random(n) < 0.8] = 0.0
    elif shape == "constant":
        values = np.full(n, 0.25)
    pick = top_k_largest if largest else top_k_smallest
    for k in (0, 1, 15, 27, 200, n, n + 5):
        assert pick(values, k).tolist() == _full_sort(values, min(k, n), largest), k


def test_top_k_puts_nan_last() -> None:
    values = np.random.default_rng(3).random(60_000)
    values[::7] = np.nan
    for k in (10, 9000):
        for largest, pick in ((False, top_k_smallest), (True, top_k_largest)):
            got = pick(values, k)
            assert not np.isnan(values[got]).any()
            assert got.tolist() == _full_sort(
                np.nan_to_num(values, nan=-np.inf if largest else np.inf), k, largest
            )


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


def test_exact_search_ranks_tight_clusters_far_from_the_origin() -> None:
    # Neighbour distances ~1e-3 at norms ~10: the expanded |y|^2 - 2x.y + |x|^2 must not
    # lose the ranking to rounding (in float32 it did).
    rng = np.random.default_rng(7)
    centres = 10 * rng.normal(size=(5, 20))
    points = centres[rng.integers(0, 5, 4000)] + 1e-3 * rng.normal(size=(4000, 20))
    search = ExactSearch(points)
    for row in range(0, 4000, 97):
        full = ((points - points[row]) ** 2).sum(axis=1)
        idx, d2 = search.search(points[row], 10)
        assert idx.tolist() == np.argsort(full, kind="stable")[:10].tolist()
        np.testing.assert_allclose(d2, full[idx], rtol=1e-6, atol=1e-12)


class _Fixed:
    """An 'index' that gives fixed answers (rows found by the query's first coordinate)."""

    def __init__(self, answers: dict[int, list[int]]) -> None:
        self.answers = answers
        self.asked: list[int] = []

    def search(self, query: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
        self.asked.append(k)
        found = self.answers[int(query[0])][:k]
        return np.array(found), np.zeros(len(found))


def test_measure_recall_keeps_the_best_of_the_candidates() -> None:
    points = np.array([[0.0, 0.0], [1.0, 0.0], [2.0, 1.0], [3.0, 1.0], [4.0, 3.0]])
    exact = ExactSearch(points)
    # Each row's nearest other point is at squared distance 1 (5 for row 4); the index
    # answers the row itself, then row r+2, which is never that nearest one.
    index = _Fixed({r: [r, (r + 2) % 5, (r + 1) % 5, (r + 3) % 5, (r + 4) % 5] for r in range(5)})
    assert measure_recall(index, exact, k=2, sample=5) == 0.5  # type: ignore[arg-type]
    # Asked for all five, the best two by exact distance are the true two.
    assert measure_recall(index, exact, k=2, sample=5, candidates=5) == 1.0  # type: ignore[arg-type]
    assert index.asked == [2] * 5 + [5] * 5


def test_measure_recall_counts_a_tie_at_the_kth_place_as_found() -> None:
    # Rows 1 and 2 are both at squared distance 1 from row 0.
    points = np.array([[0.0, 0.0], [1.0, 0.0], [2.0, 1.0]])
    points[2] = [-1.0, 0.0]
    exact = ExactSearch(points)
    answers = {0: [0, 2], 1: [1, 0], -1: [2, 0]}
    index = _Fixed(answers)
    assert measure_recall(index, exact, k=2, sample=3) == 1.0  # type: ignore[arg-type]


def test_hnsw_index_survives_its_bytes() -> None:
    points = _points(3000)
    index = HnswSearch(points)
    data = index.to_bytes()
    data.setflags(write=False)  # as a loaded version's arrays are
    again = HnswSearch.from_bytes(data)
    assert again.size == 3000 and again.dimension == points.shape[1]
    for row in (0, 1234, 2999):
        a, da = index.search(points[row], 12)
        b, db = again.search(points[row], 12)
        assert a.tolist() == b.tolist() and np.allclose(da, db)


def test_bytes_of_another_kind_of_index_are_refused() -> None:
    import faiss
    import pytest

    flat = faiss.IndexFlatL2(4)
    flat.add(np.zeros((3, 4), dtype=np.float32))
    with pytest.raises(ValueError, match="not an HNSW index"):
        HnswSearch.from_bytes(faiss.serialize_index(flat))
