"""Diffusion map: analytic spectra and invariants."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from service.geometry.diffusion import (
    choose_n_coordinates,
    diffusion_coordinates,
    diffusion_map,
    signed_power,
)
from tests.geometry._graphs import cycle_graph, path_graph

EPS = np.finfo(np.float64).eps


def test_path_graph_spectrum_is_cosines() -> None:
    # Simple random walk on the path P_n: eigenvalues cos(pi k / (n - 1)), k = 0..n-1
    # (Chung 1997, Spectral Graph Theory, Example 1.4).
    n = 12
    dm = diffusion_map(path_graph(n), alpha=0.0, n_eigenpairs=n)
    expected = np.cos(np.pi * np.arange(n) / (n - 1))
    np.testing.assert_allclose(dm.eigenvalues, expected, atol=1e3 * EPS)


def test_cycle_graph_spectrum_is_cosines_for_every_alpha() -> None:
    # C_n is regular, so alpha changes nothing: eigenvalues cos(2 pi k / n).
    n = 10
    expected = np.sort(np.cos(2 * np.pi * np.arange(n) / n))[::-1]
    for alpha in (0.0, 0.5, 1.0):
        dm = diffusion_map(cycle_graph(n), alpha=alpha, n_eigenpairs=n)
        np.testing.assert_allclose(dm.eigenvalues, expected, atol=1e3 * EPS)


def test_invariants(small_graph) -> None:
    dm = diffusion_map(small_graph, n_eigenpairs=15)
    assert dm.pi.sum() == pytest.approx(1.0, abs=1e-14)
    assert np.all(dm.pi > 0)
    np.testing.assert_array_equal(dm.psi[:, 0], 1.0)
    assert dm.eigenvalues[0] == 1.0
    assert np.all(np.diff(dm.eigenvalues) <= 0)
    gram = dm.psi.T @ (dm.pi[:, None] * dm.psi)
    np.testing.assert_allclose(gram, np.eye(15), atol=1e-10)
    assert dm.residuals.max() <= 1e-8
    np.testing.assert_allclose(dm.degrees, np.asarray(small_graph.sum(axis=1)).ravel())


def test_right_eigenvectors_of_the_markov_matrix(small_graph) -> None:
    for alpha in (0.0, 0.5, 1.0):
        dm = diffusion_map(small_graph, alpha=alpha, n_eigenpairs=8)
        q = dm.degrees
        K = sp.diags(q**-alpha) @ small_graph @ sp.diags(q**-alpha)
        P = sp.diags(1 / np.asarray(K.sum(axis=1)).ravel()) @ K
        np.testing.assert_allclose(P @ dm.psi, dm.psi * dm.eigenvalues, atol=1e-8)


def test_signs_are_deterministic(small_graph) -> None:
    dm = diffusion_map(small_graph, n_eigenpairs=10)
    rows = np.argmax(np.abs(dm.psi), axis=0)
    assert np.all(dm.psi[rows, np.arange(10)] > 0)


def test_repeated_calls_are_bit_identical(medium_graph, monkeypatch) -> None:
    import service.geometry.spectrum as spectrum

    monkeypatch.setattr(spectrum, "COARSE_MAX", 150)
    a = diffusion_map(medium_graph, n_eigenpairs=12, solver="chebyshev")
    b = diffusion_map(medium_graph, n_eigenpairs=12, solver="chebyshev")
    np.testing.assert_array_equal(a.psi, b.psi)
    np.testing.assert_array_equal(a.eigenvalues, b.eigenvalues)


def test_node_order_only_permutes_rows(small_graph) -> None:
    perm = np.random.default_rng(3).permutation(small_graph.shape[0])
    a = diffusion_map(small_graph, n_eigenpairs=6)
    b = diffusion_map(small_graph[perm][:, perm], n_eigenpairs=6)
    np.testing.assert_allclose(b.eigenvalues, a.eigenvalues, atol=1e-12)
    # An isolated eigenvalue fixes its eigenvector up to sign, which the largest-entry
    # rule fixes independently of the order; clustered ones are compared as subspaces.
    lam = a.eigenvalues
    gaps = np.minimum(np.r_[np.inf, -np.diff(lam)], np.r_[-np.diff(lam), np.inf])
    isolated = np.flatnonzero(gaps > 1e-4)
    assert isolated.size >= 3
    np.testing.assert_allclose(b.psi[:, isolated], a.psi[perm][:, isolated], atol=1e-7)


def test_tau_matches_the_explicitly_regularised_graph(small_graph) -> None:
    n = small_graph.shape[0]
    tau = 0.7
    dense = sp.csr_matrix(small_graph.toarray() + tau / n)
    a = diffusion_map(small_graph, tau=tau, n_eigenpairs=8)
    # The explicit version has self-loops, which the implicit one includes too.
    b = diffusion_map(dense, n_eigenpairs=8)
    np.testing.assert_allclose(a.eigenvalues, b.eigenvalues, atol=1e-10)
    np.testing.assert_allclose(a.degrees, b.degrees)
    np.testing.assert_allclose(np.abs(a.psi.T @ (a.pi[:, None] * b.psi)), np.eye(8), atol=1e-7)


def test_input_is_not_modified(small_graph) -> None:
    before = small_graph.copy()
    diffusion_map(small_graph, n_eigenpairs=4)
    assert abs(small_graph - before).max() == 0


@pytest.mark.parametrize(
    ("W", "match"),
    [
        (sp.block_diag([np.ones((3, 3)) - np.eye(3)] * 2, format="csr"), "components"),
        (sp.csr_matrix((2, 2)), "zero-degree"),
        (sp.csr_matrix(np.array([[0, 1.0], [0.5, 0]])), "symmetric"),
        (sp.csr_matrix(np.array([[0, -1.0], [-1.0, 0]])), "non-negative"),
        (sp.csr_matrix((2, 3)), "square"),
    ],
)
def test_bad_graphs_raise(W, match) -> None:
    with pytest.raises(ValueError, match=match):
        diffusion_map(W)


def test_bad_parameters_raise(small_graph) -> None:
    with pytest.raises(ValueError, match="alpha"):
        diffusion_map(small_graph, alpha=1.5)
    with pytest.raises(ValueError, match="tau"):
        diffusion_map(small_graph, tau=-1.0)
    with pytest.raises(ValueError, match="n_eigenpairs"):
        diffusion_map(small_graph, n_eigenpairs=1)


def test_choose_n_coordinates() -> None:
    lam = np.array([1.0, 0.9, 0.8, 0.5, 0.1])
    # 0.9^t / 0.9^t = 1, (0.8/0.9)^2 = 0.79, (0.5/0.9)^2 = 0.31, (0.1/0.9)^2 = 0.012
    assert choose_n_coordinates(lam, 2, threshold=0.05) == 3
    assert choose_n_coordinates(lam, 2, threshold=0.5) == 2
    assert choose_n_coordinates(lam, 2, threshold=0.99) == 2  # at least 2
    assert choose_n_coordinates(lam, 2, threshold=0.0, max_coordinates=3) == 3
    assert choose_n_coordinates(lam, 100, threshold=1e-300) == 4
    assert choose_n_coordinates(np.array([1.0, 0.5]), 1) == 1
    with pytest.raises(ValueError, match="t must"):
        choose_n_coordinates(lam, 0)


def test_diffusion_coordinates_scale_psi(small_graph) -> None:
    dm = diffusion_map(small_graph, n_eigenpairs=6)
    coords = diffusion_coordinates(dm, 2.5, 4)
    assert coords.shape == (small_graph.shape[0], 4)
    np.testing.assert_allclose(coords, dm.psi[:, 1:5] * dm.eigenvalues[1:5] ** 2.5)
    with pytest.raises(ValueError, match="n_coordinates"):
        diffusion_coordinates(dm, 1, 6)


def test_signed_power_keeps_the_square_of_integer_powers() -> None:
    lam = np.array([0.9, -0.6, 0.0])
    np.testing.assert_allclose(signed_power(lam, 3), lam**3)
    np.testing.assert_allclose(signed_power(lam, 2) ** 2, lam**4)
