"""Coordinate indexes built with a version (service.pipeline.coordinate_indexes)."""

from __future__ import annotations

import numpy as np

from service.geometry.coordinate_index import component_coordinates
from service.geometry.nearest import ExactSearch
from service.pipeline.coordinate_indexes import (
    RECALL_ARRAY,
    T_ARRAY,
    build_coordinate_indexes,
    index_array_name,
    stored_index,
    trimmed_eigenvalues,
)


def _arrays(seed: int = 0) -> dict[str, np.ndarray]:
    """Two components: 600 clustered vertices (0) and 40 (1); 3 eigenvectors + trivial,
    vertices of the two interleaved so member order matters."""
    rng = np.random.default_rng(seed)
    n = 640
    component = np.zeros(n, dtype=np.int32)
    component[rng.choice(n, 40, replace=False)] = 1
    psi = np.ones((n, 5))
    centres = rng.normal(size=(6, 4))
    psi[:, 1:] = centres[rng.integers(0, 6, n)] + 0.05 * rng.normal(size=(n, 4))
    eigenvalues = np.array([[1.0, 0.9, 0.7, 0.5, 0.0], [1.0, 0.8, 0.6, 0.0, 0.0]])
    return {
        "component": component,
        "psi": psi,
        "eigenvalues": eigenvalues,
        "n_coordinates": np.array([3, 2]),
    }


def test_only_large_components_get_an_index_with_its_recall() -> None:
    arrays = _arrays()
    seen: list[float] = []
    out, stats = build_coordinate_indexes(arrays, 2.0, min_vertices=100, progress=seen.append)
    assert set(out) == {index_array_name(0), RECALL_ARRAY, T_ARRAY}
    assert seen == [1.0]
    assert [s["component"] for s in stats] == [0] and stats[0]["vertices"] == 600
    assert 0.9 <= stats[0]["recall"] <= 1.0
    assert np.isnan(out[RECALL_ARRAY][1]) and out[T_ARRAY].tolist() == [2.0]
    # Nothing is large enough: nothing is added.
    assert build_coordinate_indexes(arrays, 2.0, min_vertices=1000) == ({}, [])


def test_stored_index_searches_the_coordinates_queries_use() -> None:
    arrays = _arrays(1)
    out, _ = build_coordinate_indexes(arrays, 2.0, min_vertices=100)
    stored = arrays | out
    found = stored_index(stored, 0, 2.0, points=600, dimension=3)
    assert found is not None
    index, recall = found
    members = np.flatnonzero(arrays["component"] == 0)
    lam = trimmed_eigenvalues(arrays["eigenvalues"][0])
    points = component_coordinates(arrays["psi"][members, : lam.size], lam, 2.0, 3)
    exact = ExactSearch(points)
    agree = 0
    for row in range(0, 600, 37):
        got, _ = index.search(points[row], 10)
        want, _ = exact.search(points[row], 10)
        assert got[0] == row
        agree += len(set(got.tolist()) & set(want.tolist()))
    assert agree / (10 * len(range(0, 600, 37))) >= 0.9
    assert recall == out[RECALL_ARRAY][0]


def test_a_stored_index_that_does_not_fit_is_not_used() -> None:
    arrays = _arrays()
    stored = arrays | build_coordinate_indexes(arrays, 2.0, min_vertices=100)[0]
    assert stored_index(stored, 0, 1.0, points=600, dimension=3) is None  # another t
    assert stored_index(stored, 0, 2.0, points=599, dimension=3) is None
    assert stored_index(stored, 0, 2.0, points=600, dimension=4) is None
    assert stored_index(stored, 1, 2.0, points=40, dimension=2) is None  # none built
    assert stored_index(arrays, 0, 2.0, points=600, dimension=3) is None  # an older version


def test_trimmed_eigenvalues_drop_the_padding_only() -> None:
    assert trimmed_eigenvalues(np.array([1.0, 0.5, 0.0, 0.0])).tolist() == [1.0, 0.5]
    assert trimmed_eigenvalues(np.zeros(3)).tolist() == [0.0]
