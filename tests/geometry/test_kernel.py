"""Self-tuning affinities: invariants, the floor, and the new-point formula."""

from __future__ import annotations

import numpy as np
import pytest

from service.geometry.kernel import (
    SIGMA_FLOOR_FRACTION,
    AffinityGraph,
    bandwidth,
    kernel_weights,
    self_tuning_affinity,
)
from service.geometry.knn import KnnGraph, cosine_knn, euclidean_knn
from tests.geometry.test_knn import topic_documents


@pytest.fixture(scope="module")
def affinity() -> tuple[KnnGraph, AffinityGraph]:
    graph = cosine_knn(topic_documents(300, 5, seed=11), 8, method="exact")
    return graph, self_tuning_affinity(graph)


def test_weights_are_symmetric_positive_with_zero_diagonal(affinity):
    _, aff = affinity
    W = aff.weights
    assert W.dtype == np.float64
    assert abs(W - W.T).max() == 0.0
    assert np.all(W.diagonal() == 0.0)
    assert np.all(W.data > 0.0) and np.all(W.data <= 1.0)


def test_edges_are_the_union_of_the_knn_relations(affinity):
    graph, aff = affinity
    n, k = graph.indices.shape
    directed = np.zeros((n, n), dtype=bool)
    directed[np.repeat(np.arange(n), k), graph.indices.ravel()] = True
    np.testing.assert_array_equal(aff.weights.toarray() > 0, directed | directed.T)


def test_sigma_is_the_kth_distance_and_kernel_weights_reproduce_the_rows(affinity):
    graph, aff = affinity
    np.testing.assert_array_equal(aff.sigma, graph.distances[:, -1])
    W = aff.weights.toarray()
    for i in (0, 17, 123):
        row = kernel_weights(graph.distances[i], aff.sigma[i], aff.sigma[graph.indices[i]])
        # The stored value is the max over both directions, which agree up to rounding.
        np.testing.assert_allclose(W[i, graph.indices[i]], row, rtol=1e-6)
        assert bandwidth(graph.distances[i], graph.k, aff.sigma_floor) == aff.sigma[i]


def test_formula_on_a_line_by_hand():
    g = euclidean_knn(np.array([[0.0], [1.0], [3.0]]), 1)
    aff = self_tuning_affinity(g)
    # sigma = [1, 1, 2]; w01 = e^{-1}, w12 = e^{-4 / (1 * 2)} from point 2's list.
    np.testing.assert_allclose(aff.sigma, [1.0, 1.0, 2.0])
    expected = np.array([[0, np.exp(-1), 0], [np.exp(-1), 0, np.exp(-2)], [0, np.exp(-2), 0]])
    np.testing.assert_allclose(aff.weights.toarray(), expected, rtol=1e-12)


def test_floor_keeps_rows_of_exact_duplicates_finite():
    # Points 0-4 coincide: with k = 3 their k-th distance is zero.
    points = np.array([[0.0]] * 5 + [[1.0], [2.5], [4.0], [6.0]])
    g = euclidean_knn(points, 3)
    aff = self_tuning_affinity(g)
    raw = g.distances[:, -1]
    assert np.all(raw[:5] == 0.0)
    assert aff.sigma_floor == pytest.approx(SIGMA_FLOOR_FRACTION * np.median(raw[raw > 0]))
    np.testing.assert_allclose(aff.sigma[:5], aff.sigma_floor)
    assert np.all(np.isfinite(aff.weights.data)) and np.all(aff.weights.data > 0)
    # The copies are joined to each other with weight exp(0) = 1.
    np.testing.assert_allclose(aff.weights[0, 1], 1.0)


def test_explicit_floor_and_all_zero_distances():
    g = euclidean_knn(np.zeros((4, 2)), 2)
    aff = self_tuning_affinity(g)
    assert aff.sigma_floor == 1.0
    np.testing.assert_allclose(aff.weights.data, 1.0)
    assert self_tuning_affinity(g, sigma_floor=0.5).sigma.tolist() == [0.5] * 4
    with pytest.raises(ValueError, match="sigma_floor"):
        self_tuning_affinity(g, sigma_floor=0.0)


def test_bandwidth_and_kernel_weights_check_their_inputs():
    with pytest.raises(ValueError, match="k must"):
        bandwidth(np.array([0.1, 0.2]), 3)
    with pytest.raises(ValueError, match="equal length"):
        kernel_weights(np.zeros(2), 1.0, np.ones(3))
    with pytest.raises(ValueError, match="positive"):
        kernel_weights(np.zeros(2), 0.0, np.ones(2))


def test_graph_listing_a_point_as_its_own_neighbour_is_rejected():
    bad = KnnGraph(np.array([[0], [0]]), np.zeros((2, 1)), "exact", None, "euclidean")
    with pytest.raises(ValueError, match="own neighbour"):
        self_tuning_affinity(bad)
