"""Nystrom extension: in-graph nodes reproduce their own eigenvector entries."""

from __future__ import annotations

import numpy as np
import pytest

from service.geometry.diffusion import diffusion_map
from service.geometry.nystrom import extend, extend_many


@pytest.mark.parametrize("alpha", [0.0, 0.5, 1.0])
@pytest.mark.parametrize("tau", [0.0, 1.5])
def test_own_row_reproduces_psi(small_graph, alpha, tau) -> None:
    dm = diffusion_map(small_graph, alpha=alpha, tau=tau, n_eigenpairs=12)
    W = small_graph.tocsr()
    keep = np.abs(dm.eigenvalues) > 1e-3
    scale = np.abs(dm.psi).max(axis=0)
    for i in (0, 17, 123):
        row = W[i]
        got = extend(dm, row.indices, row.data)
        np.testing.assert_allclose(
            got[keep], dm.psi[i, keep], rtol=1e-8, atol=1e-8 * scale[keep].max()
        )


def test_batch_equals_single(small_graph) -> None:
    dm = diffusion_map(small_graph, n_eigenpairs=6)
    rng = np.random.default_rng(0)
    idx = rng.choice(small_graph.shape[0], size=(4, 7), replace=True)
    rows = rng.uniform(0.1, 1.0, size=(4, 7))
    batch = extend_many(dm, idx, rows)
    for b in range(4):
        np.testing.assert_allclose(batch[b], extend(dm, idx[b], rows[b]))
    np.testing.assert_array_equal(batch[:, 0], 1.0)


def test_new_point_at_a_node_lies_near_it(small_graph) -> None:
    # A point whose weights copy node i's row up to scale gets node i's psi: the alpha
    # normalisation of the new point cancels in p(x, j).
    dm = diffusion_map(small_graph, n_eigenpairs=6)
    row = small_graph.tocsr()[5]
    np.testing.assert_allclose(extend(dm, row.indices, 3.0 * row.data), dm.psi[5], atol=1e-8)


def test_bad_input(small_graph) -> None:
    dm = diffusion_map(small_graph, n_eigenpairs=4)
    with pytest.raises(ValueError, match="zero kernel weight"):
        extend(dm, np.array([0, 1]), np.array([0.0, 0.0]))
    with pytest.raises(ValueError, match="outside"):
        extend(dm, np.array([10**6]), np.array([1.0]))
    with pytest.raises(ValueError, match="differ"):
        extend(dm, np.array([0, 1]), np.array([1.0]))
    with pytest.raises(ValueError, match="non-negative"):
        extend(dm, np.array([0]), np.array([-1.0]))
