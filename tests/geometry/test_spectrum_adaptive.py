"""The "adaptive" solver rule: which solver it picks, and that its answer matches dense."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp
from threadpoolctl import threadpool_info

import service.geometry.spectrum as spectrum
from service.geometry.spectrum import coarse_ritz_values, leading_eigenpairs
from tests.geometry._graphs import random_knn_graph
from tests.geometry.test_spectrum import conjugate


def weakly_joined_groups(n_groups: int, size: int, seed: int = 0) -> sp.csr_matrix:
    """Dense random groups joined in a ring by single weak edges: a clustered spectrum top."""
    gen = np.random.default_rng(seed)
    blocks = []
    for _ in range(n_groups):
        B = gen.uniform(0.5, 1.0, (size, size))
        B = np.triu(B, 1)
        blocks.append(B + B.T)
    W = sp.lil_matrix(sp.block_diag(blocks))
    for g in range(n_groups):
        a, b = g * size, ((g + 1) % n_groups) * size + 1
        W[a, b] = W[b, a] = 1e-3
    return sp.csr_matrix(W)


@pytest.fixture(autouse=True)
def _small_limits(monkeypatch):
    # Test graphs of a few hundred nodes must leave the dense path and aggregate.
    monkeypatch.setattr(spectrum, "DENSE_MAX", 100)
    monkeypatch.setattr(spectrum, "COARSE_MAX", 60)


def _agrees_with_dense(op: spectrum.SymOperator, k: int, got: spectrum.Eigenpairs) -> None:
    ref = leading_eigenpairs(op, k, solver="dense")
    assert got.residuals.max() <= 1e-9
    np.testing.assert_allclose(got.values, ref.values, atol=1e-9)
    assert sla.subspace_angles(got.vectors, ref.vectors).max() < 1e-6


def test_clustered_top_goes_to_shift_invert() -> None:
    op = conjugate(weakly_joined_groups(30, 12))
    k = 12
    theta = coarse_ritz_values(op, k + 10, spectrum.COARSE_MAX)
    assert 1.0 - theta[k - 1] <= spectrum.SHIFT_INVERT_GAP  # the premise of the rule
    got = leading_eigenpairs(op, k, solver="adaptive", tol=1e-9)
    assert got.solver == "shift-invert"
    _agrees_with_dense(op, k, got)


def test_spread_top_goes_to_chebyshev() -> None:
    op = conjugate(random_knn_graph(400, seed=3))
    k = 12
    theta = coarse_ritz_values(op, k + 10, spectrum.COARSE_MAX)
    assert 1.0 - theta[k - 1] > spectrum.SHIFT_INVERT_GAP
    got = leading_eigenpairs(op, k, solver="adaptive", tol=1e-9)
    assert got.solver == "chebyshev"
    _agrees_with_dense(op, k, got)


def test_auto_follows_the_switch(monkeypatch) -> None:
    op = conjugate(weakly_joined_groups(30, 12))
    monkeypatch.setattr(spectrum, "AUTO_SOLVER", "chebyshev")
    assert leading_eigenpairs(op, 12, tol=1e-9).solver == "chebyshev"
    monkeypatch.setattr(spectrum, "AUTO_SOLVER", "adaptive")
    assert leading_eigenpairs(op, 12, tol=1e-9).solver == "shift-invert"


def test_blas_threads_are_restored() -> None:
    before = [(i["prefix"], i["num_threads"]) for i in threadpool_info()]
    leading_eigenpairs(conjugate(random_knn_graph(400, seed=3)), 8, solver="adaptive")
    assert [(i["prefix"], i["num_threads"]) for i in threadpool_info()] == before
