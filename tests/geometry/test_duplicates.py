"""Exact duplicate groups on weighted rows."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from service.geometry.duplicates import exact_duplicate_groups


def test_copies_point_to_their_lowest_index():
    rng = np.random.default_rng(0)
    base = sp.random(30, 50, density=0.2, random_state=1, format="csr", dtype=np.float32)
    copies = rng.integers(30, size=20)
    X = sp.vstack([base, base[copies]]).tocsr()
    labels = exact_duplicate_groups(X)
    # Random rows are distinct with probability one, so the expected labels are known.
    assert labels[:30].tolist() == list(range(30))
    assert labels[30:].tolist() == copies.tolist()


def test_labels_follow_the_rows_under_permutation():
    base = sp.random(15, 20, density=0.3, random_state=2, format="csr")
    X = sp.vstack([base, base[:5], base[:5]]).tocsr()
    perm = np.random.default_rng(3).permutation(X.shape[0])
    labels = exact_duplicate_groups(X)
    permuted = exact_duplicate_groups(X[perm])
    # Same partition into groups, each represented by its lowest (new) index.
    for group in np.unique(labels):
        members = np.flatnonzero(labels[perm] == group)
        assert np.all(permuted[members] == members.min())


def test_a_value_differing_in_the_last_bit_is_not_a_duplicate():
    row = np.array([[0.5, 0.25, 0.0]], dtype=np.float32)
    other = row.copy()
    other[0, 0] = np.nextafter(np.float32(0.5), np.float32(1.0))
    labels = exact_duplicate_groups(sp.csr_matrix(np.vstack([row, other, row])))
    assert labels.tolist() == [0, 1, 0]


def test_storage_details_do_not_matter():
    # Row 1 equals row 0 but is stored with unsorted indices, an entry split in two
    # and an explicit zero.
    X = sp.csr_matrix(
        (
            np.array([1.0, 2.0, 1.5, 1.0, 0.5, 0.0]),
            np.array([1, 2, 2, 1, 2, 0]),
            np.array([0, 2, 6]),
        ),
        shape=(2, 3),
    )
    assert np.array_equal(X.toarray()[0], X.toarray()[1])
    assert exact_duplicate_groups(X).tolist() == [0, 0]


def test_empty_rows_form_one_group():
    X = sp.csr_matrix(np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 0.0]]))
    assert exact_duplicate_groups(X).tolist() == [0, 1, 0]


def test_dense_input_is_rejected():
    with pytest.raises(ValueError, match="sparse"):
        exact_duplicate_groups(np.eye(2))
