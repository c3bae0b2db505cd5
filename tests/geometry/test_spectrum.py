"""Eigen-solvers of the symmetric conjugate: agreement, residuals, bounds."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp

from service.geometry.diffusion import diffusion_map
from service.geometry.spectrum import (
    SymOperator,
    coarse_ritz_values,
    leading_eigenpairs,
)


def conjugate(W: sp.csr_matrix, tau: float = 0.0) -> SymOperator:
    n = W.shape[0]
    q = np.asarray(W.sum(axis=1)).ravel() + tau
    u = 1.0 / q
    d = u * (W @ u) + tau / n * u * u.sum()
    s = u / np.sqrt(d)
    A = sp.csr_matrix(sp.diags(s) @ W @ sp.diags(s))
    top = np.sqrt(d) / np.linalg.norm(np.sqrt(d))
    return SymOperator(sparse=A, rank_one=s, rank_one_scale=tau / n, top=top)


@pytest.fixture(autouse=True)
def _small_coarse_level(monkeypatch):
    # Make the 1000-node test graph go through two or three aggregation levels.
    import service.geometry.spectrum as spectrum

    monkeypatch.setattr(spectrum, "COARSE_MAX", 150)


@pytest.mark.parametrize(
    ("solver", "tau"),
    [
        ("chebyshev", 0.0),
        ("chebyshev", 2.0),
        ("shift-invert", 0.0),
        ("shift-invert", 2.0),
        ("arpack", 0.0),
        ("arpack", 2.0),
        ("lobpcg", 0.0),
    ],
)
def test_solvers_agree_with_dense_by_subspace_angle(medium_graph, solver, tau) -> None:
    op = conjugate(medium_graph, tau)
    k = 6 if solver == "lobpcg" else 16
    ref = leading_eigenpairs(op, k, solver="dense")
    got = leading_eigenpairs(op, k, solver=solver, tol=1e-9)
    assert got.solver == solver
    assert got.residuals.max() <= 1e-9
    np.testing.assert_allclose(got.values, ref.values, atol=1e-9)
    # Compare spans, never vectors one by one (clustered eigenvalues rotate bases).
    assert sla.subspace_angles(got.vectors, ref.vectors).max() < 1e-6


def test_top_pair_is_exact(small_graph) -> None:
    op = conjugate(small_graph)
    pairs = leading_eigenpairs(op, 5)
    assert pairs.values[0] == 1.0
    np.testing.assert_array_equal(pairs.vectors[:, 0], op.top)
    np.testing.assert_allclose(op.matmat(op.top), op.top, atol=1e-13)


def test_coarse_ritz_values_are_lower_bounds(medium_graph) -> None:
    # Courant-Fischer: a Galerkin restriction underestimates every top eigenvalue.
    op = conjugate(medium_graph)
    theta = coarse_ritz_values(op, 30, coarse_max=100)
    exact = leading_eigenpairs(op, 30, solver="dense").values
    assert np.all(theta <= exact + 1e-12)
    assert theta[0] == pytest.approx(1.0, abs=1e-12)


def test_smallest_eigenvalue_is_below_the_spectrum(small_graph) -> None:
    op = conjugate(small_graph)
    lowest = sla.eigvalsh(op.dense())[0]
    assert leading_eigenpairs(op, 3).smallest <= lowest + 1e-12


def test_bad_solver_and_k() -> None:
    op = conjugate(sp.csr_matrix(np.ones((4, 4)) - np.eye(4)))
    with pytest.raises(ValueError, match="solver"):
        leading_eigenpairs(op, 2, solver="magic")
    with pytest.raises(ValueError, match="k"):
        leading_eigenpairs(op, 5)


def test_auto_uses_chebyshev_above_dense_limit(monkeypatch, medium_graph) -> None:
    import service.geometry.spectrum as spectrum

    monkeypatch.setattr(spectrum, "DENSE_MAX", 500)
    monkeypatch.setattr(spectrum, "COARSE_MAX", 150)
    dm = diffusion_map(medium_graph, n_eigenpairs=11)
    assert dm.solver == "chebyshev"
    assert dm.residuals.max() <= 1e-8
