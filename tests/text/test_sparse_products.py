"""The query path's sparse products against scipy's own on random matrices."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from service.text.sparse_products import combine_columns, gather_entries, row_dots, row_entries


@pytest.mark.parametrize("seed", range(5))
def test_row_dots_equal_scipy_product(seed: int) -> None:
    rng = np.random.default_rng(seed)
    matrix = sp.random(300, 500, density=0.02, format="csr", random_state=seed)
    x = sp.random(1, 500, density=0.05, format="csr", random_state=seed + 100)
    rows = rng.choice(300, size=40, replace=True)  # repeats allowed
    # Shuffled columns: the function may not rely on their order.
    shuffle = rng.permutation(x.indices.size)
    got = row_dots(matrix, rows, x.indices[shuffle], x.data[shuffle])
    want = (matrix[rows] @ x.T).toarray().ravel()
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-15)


def test_empty_rows_vector_and_selection() -> None:
    matrix = sp.csr_matrix(np.array([[0.0, 1.0, 2.0], [0.0, 0.0, 0.0], [3.0, 0.0, 0.0]]))
    cols, vals = row_entries(matrix, 0)
    assert cols.tolist() == [1, 2] and vals.tolist() == [1.0, 2.0]
    assert row_dots(matrix, [1, 1], cols, vals).tolist() == [0.0, 0.0]
    assert row_dots(matrix, [0, 1, 2], cols, vals).tolist() == [5.0, 0.0, 0.0]
    assert row_dots(matrix, [], cols, vals).shape == (0,)
    assert row_dots(matrix, [0, 2], np.array([], dtype=np.int32), np.array([])).tolist() == [
        0.0,
        0.0,
    ]


@pytest.mark.parametrize("seed", range(5))
def test_combine_columns_equals_scipy_product(seed: int) -> None:
    rng = np.random.default_rng(seed)
    matrix = sp.random(400, 300, density=0.03, format="csc", random_state=seed)
    cols = rng.choice(300, size=25, replace=False)
    vals = rng.normal(size=25)
    x = np.zeros(300)
    x[cols] = vals
    np.testing.assert_allclose(combine_columns(matrix, cols, vals), matrix @ x, atol=1e-14)
    assert combine_columns(matrix, np.array([], dtype=np.int64), np.array([])).shape == (400,)
    # float32 data, as the query views store it: float32 sums, within float32 rounding.
    single = matrix.astype(np.float32)
    got = combine_columns(single, cols, vals)
    assert got.dtype == np.float32
    np.testing.assert_allclose(got, single.astype(np.float64) @ x, atol=1e-5)


def test_combine_columns_refuses_a_column_outside_the_matrix() -> None:
    matrix = sp.random(10, 5, density=0.5, format="csc", random_state=0)
    with pytest.raises(IndexError):
        combine_columns(matrix, np.array([5]), np.array([1.0]))


def test_gather_entries_lists_every_entry_of_the_chosen_rows_in_order() -> None:
    indptr = np.array([0, 2, 2, 5, 6])  # rows of 2, 0, 3 and 1 entries
    owner, positions = gather_entries(indptr, np.array([2, 1, 0, 2]))
    assert owner.tolist() == [0, 0, 0, 2, 2, 3, 3, 3]
    assert positions.tolist() == [2, 3, 4, 0, 1, 2, 3, 4]
