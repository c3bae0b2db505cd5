"""Graphs shared by the geometry tests."""

from __future__ import annotations

import pytest
import scipy.sparse as sp

from tests.geometry._graphs import random_knn_graph


@pytest.fixture(scope="session")
def small_graph() -> sp.csr_matrix:
    return random_knn_graph(300)


@pytest.fixture(scope="session")
def medium_graph() -> sp.csr_matrix:
    return random_knn_graph(1000, seed=1)
