"""Products of a sparse matrix with one sparse vector, in a handful of vectorised numpy
steps, for the per-request cosines of the query path.

A related-documents answer needs the cosine of the query's TF-IDF vector with 10-200
candidate rows: scipy's fancy row indexing builds two sparse matrices for that (about
0.25 ms per request on this machine) where gathering the few thousand entries directly
costs a few tens of microseconds. Placing a draft needs its cosine with every vertex,
hundreds of thousands of entries, where scipy's C loops win.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

__all__ = ["combine_columns", "gather_entries", "row_dots", "row_entries"]


def row_entries(
    matrix: sp.csr_matrix, row: int
) -> tuple[NDArray[np.int32 | np.int64], NDArray[np.float64]]:
    """(columns, values) of one row, as views of the matrix's arrays."""
    start, end = int(matrix.indptr[row]), int(matrix.indptr[row + 1])
    return matrix.indices[start:end], matrix.data[start:end]


def row_dots(
    matrix: sp.csr_matrix,
    rows: NDArray[np.integer] | list[int],
    columns: NDArray[np.integer],
    values: NDArray[np.floating],
) -> NDArray[np.float64]:
    """``matrix[rows] @ x`` for the sparse vector ``x`` with entries ``values`` at
    ``columns`` (distinct; any order)."""
    rows = np.asarray(rows, dtype=np.int64)
    out = np.zeros(rows.size)
    if rows.size == 0 or len(columns) == 0:
        return out
    owner, positions = gather_entries(matrix.indptr, rows)
    if positions.size == 0:
        return out
    # The vector spread over all columns: one lookup per entry, no search.
    dense = np.zeros(matrix.shape[1])
    dense[np.asarray(columns)] = values
    products = matrix.data[positions] * dense[matrix.indices[positions]]
    return np.bincount(owner, weights=products, minlength=rows.size)


def gather_entries(
    indptr: NDArray[np.integer], chosen: NDArray[np.int64]
) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """(owner, position): for every stored entry of the chosen major rows/columns, which
    of them it belongs to and where it sits in the matrix's arrays."""
    starts = indptr[chosen].astype(np.int64)
    lengths = indptr[chosen + 1].astype(np.int64) - starts
    total = int(lengths.sum())
    owner = np.repeat(np.arange(chosen.size), lengths)
    offsets = np.arange(total) - np.repeat(np.cumsum(lengths) - lengths, lengths)
    return owner, starts[owner] + offsets


def combine_columns(
    matrix: sp.csc_matrix, columns: NDArray[np.integer], values: NDArray[np.floating]
) -> NDArray[np.float64]:
    """``matrix @ x`` as a dense vector, for the sparse ``x`` with entries ``values`` at
    ``columns`` (distinct).

    scipy's column selection (a C loop) and a product with the selected columns: at
    100,000 documents a draft's ~100 terms touch ~190,000 stored entries, which this does
    in 0.7 ms against 4.3 ms for the numpy gather `row_dots` uses (measured on the
    bench-query collection)."""
    columns = np.asarray(columns, dtype=np.int64)
    if columns.size == 0:
        return np.zeros(matrix.shape[0])
    chosen = matrix[:, columns]
    return np.asarray(chosen @ np.asarray(values, dtype=np.float64)).ravel()
