"""Connected components: analytic graphs and the isolated-node rule."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from service.geometry.components import split_components


def cliques(sizes: list[int]) -> sp.csr_matrix:
    blocks = [np.ones((s, s)) - np.eye(s) for s in sizes]
    return sp.csr_matrix(sp.block_diag(blocks))


def test_disjoint_cliques_are_separate_components_sorted_by_size() -> None:
    W = cliques([3, 5, 2, 5])
    comp = split_components(W, min_size=3)
    assert [m.tolist() for m in comp.mapped] == [[3, 4, 5, 6, 7], [10, 11, 12, 13, 14], [0, 1, 2]]
    assert comp.isolated.tolist() == [8, 9]
    assert len(np.unique(comp.labels)) == 4


def test_every_node_reported_exactly_once() -> None:
    W = cliques([4, 1, 6, 2])
    comp = split_components(W, min_size=2)
    seen = np.sort(np.concatenate([*comp.mapped, comp.isolated]))
    assert seen.tolist() == list(range(W.shape[0]))


def test_zero_degree_rows_are_isolated_even_with_min_size_one() -> None:
    W = sp.lil_matrix((4, 4))
    W[0, 1] = W[1, 0] = 0.5
    W[3, 3] = 2.0  # a self-loop alone is no edge
    comp = split_components(W.tocsr(), min_size=1)
    assert [m.tolist() for m in comp.mapped] == [[0, 1]]
    assert comp.isolated.tolist() == [2, 3]


def test_explicit_zeros_do_not_connect() -> None:
    W = sp.csr_matrix((np.array([0.0, 0.0]), (np.array([0, 1]), np.array([1, 0]))), shape=(2, 2))
    comp = split_components(W, min_size=1)
    assert comp.mapped == []
    assert comp.isolated.tolist() == [0, 1]


def test_bad_input_raises() -> None:
    with pytest.raises(ValueError, match="square"):
        split_components(sp.csr_matrix((2, 3)), min_size=1)
    with pytest.raises(ValueError, match="min_size"):
        split_components(sp.csr_matrix((2, 2)), min_size=0)
