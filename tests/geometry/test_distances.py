"""Diffusion distances: agreement with coordinates and the truncation bound."""

from __future__ import annotations

import numpy as np
import pytest

from service.geometry.diffusion import diffusion_coordinates, diffusion_map
from service.geometry.distances import diffusion_distance, distances_from
from tests.geometry._graphs import random_knn_graph


@pytest.fixture(scope="module")
def full_map():
    W = random_knn_graph(120, seed=4, k=6)
    return diffusion_map(W, n_eigenpairs=W.shape[0])


def test_all_pairs_kept_equals_euclidean_distance_of_coordinates(full_map) -> None:
    dm = full_map
    m = dm.eigenvalues.size - 1
    for t in (1, 2.5, 7):
        coords = diffusion_coordinates(dm, t, m)
        values, bounds = distances_from(dm, 3, t, m)
        np.testing.assert_allclose(values, np.linalg.norm(coords - coords[3], axis=1), atol=1e-10)
        np.testing.assert_array_equal(bounds, 0.0)


def test_truncated_value_within_bound_of_full_value(full_map) -> None:
    dm = full_map
    m_all = dm.eigenvalues.size - 1
    for t in (1, 3):
        full, _ = distances_from(dm, 7, t, m_all)
        for m in (1, 5, 20):
            values, bounds = distances_from(dm, 7, t, m)
            assert np.all(values <= full + 1e-12)
            assert np.all(full**2 - values**2 <= bounds + 1e-10)


def test_bound_of_a_partial_map_covers_the_rest(full_map) -> None:
    # Keep only the first 15 pairs, as a solver would: the bound must cover everything
    # left out, computed or not.
    dm = full_map
    part = (dm.eigenvalues[:15], dm.psi[:, :15], dm.pi)
    m_all = dm.eigenvalues.size - 1
    for t in (1, 2, 4):
        full, _ = distances_from(dm, 0, t, m_all)
        for y in range(1, 40):
            r = diffusion_distance(part, 0, y, t, 10)
            assert r.value <= full[y] + 1e-12
            assert full[y] <= r.upper + 1e-10
            assert r.upper == pytest.approx(np.sqrt(r.value**2 + r.bound))


def test_single_pair_matches_vector_version(full_map) -> None:
    values, bounds = distances_from(full_map, 2, 2, 10)
    r = diffusion_distance(full_map, 2, 9, 2, 10)
    assert r.value == pytest.approx(values[9])
    assert r.bound == pytest.approx(bounds[9])
    assert diffusion_distance(full_map, 2, 2, 2, 10).value == 0.0


def test_bad_arguments(full_map) -> None:
    with pytest.raises(ValueError, match="n_coordinates"):
        diffusion_distance(full_map, 0, 1, 1, 0)
    with pytest.raises(ValueError, match="outside"):
        diffusion_distance(full_map, 0, 10_000, 1, 3)
    with pytest.raises(ValueError, match="t must"):
        distances_from(full_map, 0, -1, 3)
