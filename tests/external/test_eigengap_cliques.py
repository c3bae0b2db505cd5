"""Analytic check of the eigengap rule and k-means grouping on weakly joined cliques.

Source: U. von Luxburg, "A tutorial on spectral clustering", Statistics and Computing
17(4), 2007: for a graph with c connected components the random-walk matrix P has
eigenvalue 1 with multiplicity c (Proposition 4 there, stated for L_rw = I - P), and
a small perturbation of the edges keeps c eigenvalues near 1 followed by a gap
(section 8.3, the eigengap heuristic; proposition number from memory). Diffusion
coordinates built here with a dense symmetric eigensolver (numpy.linalg.eigh), as in
R. R. Coifman and S. Lafon, "Diffusion maps", ACHA 21(1), 2006, independent of the
project's own diffusion-map code.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from service.geometry.clustering import choose_n_groups, cluster_coordinates
from service.geometry.paths import transition_matrix


def _weakly_joined_cliques(sizes, bridge=1e-3):
    n = sum(sizes)
    w = np.full((n, n), bridge)
    start = 0
    for s in sizes:
        w[start : start + s, start : start + s] = 1.0
        start += s
    np.fill_diagonal(w, 0.0)
    truth = np.repeat(np.arange(len(sizes)), sizes)
    return w, truth


def _diffusion(w, alpha, t):
    """Eigenvalues (descending) and coordinates lambda_k^t psi_k, k >= 1, of P."""
    p = transition_matrix(sp.csr_matrix(w), alpha).toarray()
    q = w.sum(axis=1)
    k = w / np.outer(q**alpha, q**alpha)
    d = k.sum(axis=1)
    a = k / np.sqrt(np.outer(d, d))  # symmetric conjugate D^-1/2 K D^-1/2
    lam, v = np.linalg.eigh(a)
    lam, v = lam[::-1], v[:, ::-1]
    psi = v / np.sqrt(d)[:, None]  # right eigenvectors of P
    np.testing.assert_allclose(p @ psi, psi * lam, atol=1e-10)
    return lam, psi[:, 1:] * lam[1:] ** t


@pytest.mark.parametrize("sizes", [[12, 9, 7], [10, 10, 10, 10, 6]])
@pytest.mark.parametrize("alpha", [0.0, 1.0])
def test_eigengap_counts_the_cliques_and_kmeans_finds_them(sizes, alpha):
    w, truth = _weakly_joined_cliques(sizes)
    lam, coords = _diffusion(w, alpha, t=1.0)
    # Negative eigenvalues of a clique's random walk (-1/(s-1)) are clipped by the rule.
    assert choose_n_groups(lam, t=1.0) == len(sizes)
    g = cluster_coordinates(coords[:, : len(sizes) - 1], len(sizes), rng=0)
    pairs = set(zip(g.labels.tolist(), truth.tolist(), strict=True))
    assert len(pairs) == len(sizes)
    assert sorted(g.sizes.tolist(), reverse=True) == sorted(sizes, reverse=True)
