"""Diffusion map checked against analytic results and reference implementations."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp
from sklearn.manifold import spectral_embedding

from service.bench.spectrum_compare import compare_with_sklearn
from service.geometry.diffusion import diffusion_map
from service.geometry.distances import diffusion_distance, distances_from
from tests.geometry._graphs import random_knn_graph


@pytest.fixture(scope="module")
def graph() -> sp.csr_matrix:
    return random_knn_graph(300, seed=11, k=8)


def test_circle_gives_fourier_pairs() -> None:
    # Analytic: equally spaced points on a circle give a circulant kernel, diagonalised by
    # the Fourier modes (Gray 2006, "Toeplitz and circulant matrices: a review"); the
    # Gaussian's Fourier coefficients decrease with frequency, so psi_1, psi_2 span
    # {cos theta, sin theta} and eigenvalues come in equal pairs.
    n = 200
    theta = 2 * np.pi * np.arange(n) / n
    pts = np.column_stack([np.cos(theta), np.sin(theta)])
    d2 = ((pts[:, None, :] - pts[None, :, :]) ** 2).sum(-1)
    K = np.exp(-d2 / 0.05)
    np.fill_diagonal(K, 0.0)
    dm = diffusion_map(sp.csr_matrix(K), n_eigenpairs=7)
    lam = dm.eigenvalues
    np.testing.assert_allclose(lam[1], lam[2], atol=1e-10)
    np.testing.assert_allclose(lam[3], lam[4], atol=1e-10)
    np.testing.assert_allclose(lam[5], lam[6], atol=1e-10)
    fourier = np.column_stack([np.cos(theta), np.sin(theta)])
    assert sla.subspace_angles(dm.psi[:, 1:3], fourier).max() < 1e-6


@pytest.mark.parametrize("alpha", [0.0, 0.5, 1.0])
def test_eigenpairs_equal_dense_eigh(graph, alpha) -> None:
    # Reference: LAPACK (scipy.linalg.eigh) on the dense symmetric conjugate built here
    # from the definition (Coifman & Lafon 2006, section 2.1).
    Wd = graph.toarray()
    q = Wd.sum(1)
    K = Wd / np.outer(q**alpha, q**alpha)
    d = K.sum(1)
    A = K / np.sqrt(np.outer(d, d))
    ref_vals, ref_vecs = sla.eigh(A)
    ref_vals, ref_vecs = ref_vals[::-1], ref_vecs[:, ::-1]
    k = 12
    dm = diffusion_map(graph, alpha=alpha, n_eigenpairs=k)
    np.testing.assert_allclose(dm.eigenvalues, ref_vals[:k], atol=1e-10)
    ours = dm.psi * np.sqrt(dm.pi)[:, None]  # back to unit vectors of A
    assert sla.subspace_angles(ours, ref_vecs[:, :k]).max() < 1e-6


def test_spectral_distance_equals_the_definition(graph) -> None:
    # Definition (Coifman & Lafon 2006, eq. 3.2 / Proposition 1):
    # D_t(x, y)^2 = sum_z (P^t(x, z) - P^t(y, z))^2 / pi(z), with dense matrix powers.
    n = graph.shape[0]
    dm = diffusion_map(graph, alpha=0.5, n_eigenpairs=n)
    Wd = graph.toarray()
    q = Wd.sum(1)
    K = Wd / np.outer(q**0.5, q**0.5)
    P = K / K.sum(1)[:, None]
    pi = K.sum(1) / K.sum()
    for t in (1, 2, 3):
        Pt = np.linalg.matrix_power(P, t)
        for x in (0, 50):
            direct = np.sqrt((((Pt - Pt[x]) ** 2) / pi).sum(1))
            values, bounds = distances_from(dm, x, t, n - 1)
            np.testing.assert_allclose(values, direct, atol=1e-8)
            np.testing.assert_array_equal(bounds, 0.0)


def test_truncated_distances_lie_within_their_bounds(graph) -> None:
    # The exact value from dense matrix powers (as above) must lie between the truncated
    # value and its reported upper bound, for every pair from x.
    dm = diffusion_map(graph, alpha=1.0, n_eigenpairs=20)
    Wd = graph.toarray()
    q = Wd.sum(1)
    K = Wd / np.outer(q, q)
    P = K / K.sum(1)[:, None]
    pi = K.sum(1) / K.sum()
    for t in (1, 2, 4):
        Pt = np.linalg.matrix_power(P, t)
        for x in (3, 77):
            exact = np.sqrt((((Pt - Pt[x]) ** 2) / pi).sum(1))
            for m in (2, 10, 19):
                values, bounds = distances_from(dm, x, t, m)
                assert np.all(values <= exact + 1e-9)
                assert np.all(exact <= np.sqrt(values**2 + bounds) + 1e-9)
            r = diffusion_distance(dm, x, 5, t, 10)
            assert r.value <= exact[5] + 1e-9 <= r.upper + 2e-9


def test_same_subspace_as_sklearn_spectral_embedding(graph) -> None:
    # Reference: scikit-learn's spectral_embedding (Belkin & Niyogi 2003) with the
    # normalised Laplacian is our alpha = 0 map; it returns D^-1/2-scaled vectors, which
    # span the same space as our psi. Cut the spectrum at a clear gap so the span is
    # well defined.
    dm_all = diffusion_map(graph, alpha=0.0, n_eigenpairs=30)
    gaps = -np.diff(dm_all.eigenvalues)
    k = int(np.flatnonzero(gaps[4:] > 1e-3)[0]) + 5
    emb = spectral_embedding(
        graph, n_components=k, eigen_solver="arpack", random_state=0, drop_first=False
    )
    assert sla.subspace_angles(dm_all.psi[:, :k], emb).max() < 1e-6


def test_compare_with_sklearn_reports_agreement(graph, capsys) -> None:
    # Same reference, through the benchmark helper.
    result = compare_with_sklearn(graph, 6)
    assert {"ours_s", "sklearn_s", "ratio", "max_angle"} <= result.keys()
    assert float(result["max_angle"]) < 1e-5
    assert "ratio" in capsys.readouterr().out
