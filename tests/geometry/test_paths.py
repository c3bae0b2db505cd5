"""Tests of service.geometry.paths: transition matrix and most probable paths."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.sparse as sp

from service.geometry.paths import Path, most_probable_path, transition_matrix


def _random_affinity(n=8, density=0.45, seed=0):
    rng = np.random.default_rng(seed)
    a = rng.random((n, n)) * (rng.random((n, n)) < density)
    a = np.triu(a, 1)
    return sp.csr_matrix(a + a.T)


def _simple_paths(adjacency, source, target):
    """All simple paths source -> target in a dense adjacency matrix, by depth-first search."""
    stack = [[source]]
    while stack:
        path = stack.pop()
        last = path[-1]
        if last == target:
            yield path
            continue
        for nxt in np.flatnonzero(adjacency[last] > 0):
            if nxt not in path:
                stack.append([*path, int(nxt)])


# --- transition_matrix -------------------------------------------------------------


@pytest.mark.parametrize("alpha", [0.0, 0.5, 1.0])
def test_transition_matrix_matches_dense_formula(alpha):
    w = _random_affinity(seed=1)
    dense = w.toarray()
    q = dense.sum(axis=1)
    k = dense / np.outer(q**alpha, q**alpha)
    expected = k / k.sum(axis=1, keepdims=True)
    p = transition_matrix(w, alpha)
    assert isinstance(p, sp.csr_matrix)
    np.testing.assert_allclose(p.toarray(), expected, rtol=1e-12)
    np.testing.assert_allclose(np.asarray(p.sum(axis=1)).ravel(), 1.0, rtol=1e-12)


@pytest.mark.parametrize("alpha", [0.0, 1.0])
def test_transition_matrix_is_reversible(alpha):
    # Detailed balance pi_i P_ij = pi_j P_ji with pi proportional to the degrees of
    # K_alpha (Coifman & Lafon 2006): pi_i P_ij = K_ij / sum(d) is symmetric.
    w = _random_affinity(seed=2)
    p = transition_matrix(w, alpha).toarray()
    q = w.toarray().sum(axis=1)
    d = (w.toarray() / np.outer(q**alpha, q**alpha)).sum(axis=1)
    flow = d[:, None] * p
    np.testing.assert_allclose(flow, flow.T, rtol=1e-12, atol=1e-15)


def test_transition_matrix_isolated_vertex_keeps_zero_row():
    w = sp.csr_matrix(np.array([[0.0, 2.0, 0.0], [2.0, 0.0, 0.0], [0.0, 0.0, 0.0]]))
    p = transition_matrix(w, 1.0)
    assert p.toarray().tolist() == [[0.0, 1.0, 0.0], [1.0, 0.0, 0.0], [0.0, 0.0, 0.0]]


@pytest.mark.parametrize(
    ("w", "alpha", "match"),
    [
        (np.eye(2), 1.0, "sparse"),
        (sp.csr_matrix(np.ones((2, 3))), 1.0, "square"),
        (sp.csr_matrix(np.array([[0.0, 1.0], [2.0, 0.0]])), 1.0, "symmetric"),
        (sp.csr_matrix(np.array([[0.0, -1.0], [-1.0, 0.0]])), 1.0, "non-negative"),
        (sp.csr_matrix(np.array([[0.0, 1.0], [1.0, 0.0]])), 1.5, "alpha"),
    ],
)
def test_transition_matrix_rejects_bad_input(w, alpha, match):
    with pytest.raises(ValueError, match=match):
        transition_matrix(w, alpha)


# --- most_probable_path ------------------------------------------------------------


@pytest.mark.parametrize("seed", range(5))
def test_path_equals_brute_force_over_simple_paths(seed):
    p = transition_matrix(_random_affinity(n=8, seed=seed), 1.0)
    dense = p.toarray()
    rng = np.random.default_rng(seed)
    source, target = (int(v) for v in rng.choice(8, size=2, replace=False))
    candidates = list(_simple_paths(dense, source, target))
    path = most_probable_path(p, source, target)
    if not candidates:
        assert path is None
        return
    probabilities = [np.prod([dense[a, b] for a, b in itertools.pairwise(c)]) for c in candidates]
    best = candidates[int(np.argmax(probabilities))]
    assert isinstance(path, Path)
    assert path.probability == pytest.approx(max(probabilities), rel=1e-12)
    assert path.nodes.tolist() == best  # random weights: the optimum is unique
    np.testing.assert_allclose(
        path.step_probabilities, [dense[a, b] for a, b in itertools.pairwise(best)]
    )
    assert path.log_probability == pytest.approx(np.log(max(probabilities)), rel=1e-12)
    assert path.n_steps == len(best) - 1


def test_hand_built_graph_prefers_two_likely_steps_over_one_unlikely():
    # 0 -> 2 directly with 0.1, or 0 -> 1 -> 2 with 0.9 * 0.5 = 0.45.
    p = sp.csr_matrix(
        np.array(
            [
                [0.0, 0.9, 0.1],
                [0.5, 0.0, 0.5],
                [0.5, 0.5, 0.0],
            ]
        )
    )
    path = most_probable_path(p, 0, 2)
    assert path.nodes.tolist() == [0, 1, 2]
    assert path.probability == pytest.approx(0.45)
    # The walk is directed: backwards, 2 -> 0 directly has 0.5 > 0.5 * 0.5.
    assert most_probable_path(p, 2, 0).nodes.tolist() == [2, 0]


def test_steps_of_probability_one_are_followed():
    # A path graph 0 - 1 - 2: the end vertices move with probability 1.
    p = transition_matrix(sp.csr_matrix(np.array([[0, 1.0, 0], [1.0, 0, 1.0], [0, 1.0, 0]])), 0)
    path = most_probable_path(p, 0, 2)
    assert path.nodes.tolist() == [0, 1, 2]
    assert path.step_probabilities.tolist() == [1.0, 0.5]


def test_source_equals_target_is_one_node_with_probability_one():
    p = transition_matrix(_random_affinity(seed=3), 1.0)
    path = most_probable_path(p, 4, 4)
    assert path.nodes.tolist() == [4]
    assert path.step_probabilities.size == 0
    assert path.probability == 1.0
    assert path.log_probability == 0.0


def test_unreachable_target_returns_none():
    w = sp.block_diag([sp.csr_matrix(np.array([[0, 1.0], [1.0, 0]]))] * 2, format="csr")
    p = transition_matrix(w, 1.0)
    assert most_probable_path(p, 0, 3) is None
    assert most_probable_path(p, 0, 1).nodes.tolist() == [0, 1]


def test_accepts_sparse_arrays():
    p = transition_matrix(_random_affinity(seed=4), 0.5)
    a = most_probable_path(p, 0, 5)
    b = most_probable_path(sp.csr_array(p), 0, 5)
    assert (a is None) == (b is None)
    if a is not None:
        assert a.nodes.tolist() == b.nodes.tolist()


@pytest.mark.parametrize(
    ("p", "source", "target", "match"),
    [
        (np.eye(2), 0, 1, "sparse"),
        (sp.csr_matrix(np.ones((2, 3)) / 3), 0, 1, "square"),
        (sp.csr_matrix(np.array([[0.0, 0.5], [1.0, 0.0]])), 0, 1, "row 0 sums to 0.5"),
        (sp.csr_matrix(np.array([[0.0, 2.0], [1.0, 0.0]])), 0, 1, r"\[0, 1\]"),
        (sp.csr_matrix(np.array([[0.0, 1.0], [1.0, 0.0]])), 0, 2, r"target must be in \[0, 2\)"),
        (sp.csr_matrix(np.array([[0.0, 1.0], [1.0, 0.0]])), -1, 1, "source"),
    ],
)
def test_most_probable_path_rejects_bad_input(p, source, target, match):
    with pytest.raises(ValueError, match=match):
        most_probable_path(p, source, target)
