"""Cosine and Euclidean k-NN graphs: exactness, ties, validation, approximate search."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from service.geometry.knn import KnnGraph, cosine_knn, euclidean_knn, recall_at_k


def _unit_rows(X: sp.csr_matrix) -> sp.csr_matrix:
    norms = np.sqrt(np.asarray(X.multiply(X).sum(axis=1)).ravel())
    return sp.csr_matrix(sp.diags(1.0 / norms) @ X, dtype=np.float32)


def topic_documents(n_docs: int, n_topics: int, seed: int) -> sp.csr_matrix:
    """Random sparse unit rows with topic structure: topic terms plus shared noise."""
    rng = np.random.default_rng(seed)
    n_terms = 40 * n_topics + 200
    topic = rng.integers(n_topics, size=n_docs)
    rows, cols = [], []
    for i, t in enumerate(topic):
        own = 200 + 40 * t + rng.choice(40, size=8, replace=False)
        noise = rng.choice(n_terms, size=6, replace=False)
        terms = np.unique(np.concatenate([own, noise]))
        rows.append(np.full(terms.size, i))
        cols.append(terms)
    r, c = np.concatenate(rows), np.concatenate(cols)
    vals = rng.random(r.size) + 0.1
    return _unit_rows(sp.csr_matrix((vals, (r, c)), shape=(n_docs, n_terms)))


def brute_force(X: sp.csr_matrix, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Reference: dense cosines in float64, sorted by (distance, index)."""
    dense = X.toarray().astype(np.float64)
    sim = dense @ dense.T
    np.fill_diagonal(sim, -np.inf)
    n = sim.shape[0]
    order = np.lexsort((np.broadcast_to(np.arange(n), sim.shape), -sim), axis=1)[:, :k]
    return order, 1.0 - np.take_along_axis(sim, order, axis=1)


def test_exact_search_matches_brute_force():
    X = topic_documents(300, 6, seed=1)
    g = cosine_knn(X, 7, method="exact")
    idx, dist = brute_force(X, 7)
    # float32 products can swap neighbours whose cosines agree to ~1e-7.
    assert recall_at_k(g.indices, idx) > 0.99
    np.testing.assert_allclose(g.distances, dist, atol=1e-5)
    assert g.method == "exact" and g.recall is None and g.metric == "cosine"
    assert g.indices.dtype == np.int64 and g.distances.dtype == np.float64


def test_small_memory_budget_and_threads_do_not_change_the_result():
    X = topic_documents(400, 5, seed=2)
    a = cosine_knn(X, 5, method="exact", memory_budget_bytes=1 << 20, n_jobs=1)
    b = cosine_knn(X, 5, method="exact", n_jobs=2)
    np.testing.assert_array_equal(a.indices, b.indices)
    np.testing.assert_array_equal(a.distances, b.distances)


def test_rows_sorted_self_excluded_and_ties_by_index():
    base = topic_documents(20, 2, seed=3)
    # Rows 20..23 copy row 0: four neighbours at distance 0, listed by index.
    X = sp.vstack([base, base[[0, 0, 0, 0]]]).tocsr()
    g = cosine_knn(X, 4, method="exact")
    assert g.indices[0].tolist() == [20, 21, 22, 23]
    assert g.indices[21].tolist() == [0, 20, 22, 23]
    np.testing.assert_allclose(g.distances[0], 0.0, atol=1e-6)
    assert np.all(np.diff(g.distances, axis=1) >= 0)
    assert not np.any(g.indices == np.arange(24)[:, None])
    assert g.distances.min() >= 0.0 and g.distances.max() <= 2.0


def test_zero_rows_are_rejected_with_their_count():
    X = topic_documents(10, 2, seed=4).tolil()
    X[3, :] = 0
    X[7, :] = 0
    with pytest.raises(ValueError, match="2 all-zero row"):
        cosine_knn(sp.csr_matrix(X), 2)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"k": 0}, "k must"),
        ({"k": 10}, "k must"),
        ({"k": 2, "method": "fast"}, "method"),
        ({"k": 2, "n_jobs": 0}, "n_jobs"),
        ({"k": 2, "memory_budget_bytes": 10}, "memory_budget"),
        ({"k": 2, "recall_sample": -1}, "recall_sample"),
        ({"k": 2, "probes": 1}, "probes"),
    ],
)
def test_bad_arguments_are_rejected(kwargs, message):
    with pytest.raises(ValueError, match=message):
        cosine_knn(topic_documents(10, 2, seed=5), **kwargs)


def test_rows_must_be_unit_length():
    X = topic_documents(10, 2, seed=6) * 2.0
    with pytest.raises(ValueError, match="unit L2 norm"):
        cosine_knn(X, 2)


def test_approximate_search_reports_true_cosines_and_its_recall():
    X = topic_documents(1500, 12, seed=7)
    # Small clusters and few probes force several second-hop rounds.
    g = cosine_knn(
        X, 6, method="approximate", probes=3, docs_per_cluster=20, recall_sample=300, rng=3
    )
    assert g.method == "approximate"
    assert g.recall is not None and g.recall >= 0.9
    exact = cosine_knn(X, 6, method="exact")
    assert recall_at_k(g.indices, exact.indices) >= 0.9
    # Every reported distance is the exact cosine distance of the listed pair.
    dense = X.toarray().astype(np.float64)
    pair = np.einsum("ij,ikj->ik", dense, dense[g.indices])
    np.testing.assert_allclose(g.distances, 1.0 - pair, atol=1e-5)
    assert np.all(np.diff(g.distances, axis=1) >= 0)
    assert not np.any(g.indices == np.arange(1500)[:, None])
    assert all(len(set(row)) == 6 for row in g.indices.tolist())


def test_approximate_search_is_reproducible_and_thread_independent():
    X = topic_documents(800, 8, seed=8)
    kwargs = {"method": "approximate", "probes": 2, "docs_per_cluster": 30, "rng": 11}
    a = cosine_knn(X, 5, n_jobs=1, recall_sample=0, **kwargs)
    b = cosine_knn(X, 5, n_jobs=2, recall_sample=0, **kwargs)
    np.testing.assert_array_equal(a.indices, b.indices)
    np.testing.assert_array_equal(a.distances, b.distances)
    assert a.recall is None


def test_auto_is_exact_for_small_collections():
    assert cosine_knn(topic_documents(50, 2, seed=9), 3).method == "exact"


def test_euclidean_knn_on_a_line():
    g = euclidean_knn(np.array([[0.0], [1.0], [3.0], [3.0], [10.0]]), 2)
    assert isinstance(g, KnnGraph) and g.metric == "euclidean"
    assert g.indices.tolist() == [[1, 2], [0, 2], [3, 1], [2, 1], [2, 3]]
    np.testing.assert_allclose(g.distances, [[1, 3], [1, 2], [0, 2], [0, 2], [7, 7]])


def test_euclidean_knn_rejects_bad_input():
    with pytest.raises(ValueError, match="2-D"):
        euclidean_knn(np.zeros(5), 1)
    with pytest.raises(ValueError, match="NaN"):
        euclidean_knn(np.array([[0.0], [np.nan]]), 1)


def test_recall_at_k_counts_row_wise_overlap():
    approx = np.array([[1, 2, 3], [0, 2, 3]])
    exact = np.array([[3, 2, 1], [4, 5, 0]])
    assert recall_at_k(approx, exact) == pytest.approx(4 / 6)
    with pytest.raises(ValueError, match="equal"):
        recall_at_k(approx, exact[:1])
