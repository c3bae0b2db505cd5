"""Exact duplicate documents, found on their weighted vectors.

Why this exists: under the self-tuning kernel (`service.geometry.kernel`) a
document with at least k exact copies has bandwidth sigma = 0, and a tight group
of identical vertices puts eigenvalues of the diffusion operator at 1 that say
nothing about topics. So identical rows collapse to one vertex *before* the graph
is built: the graph, the spectrum and the groups are computed on representatives
only, every copy then receives its representative's coordinates and group, and
the caller reports the copies (which documents were merged into which).
"""

from __future__ import annotations

import hashlib

import numpy as np
import scipy.sparse as sp

from service.geometry.types import IntArray

__all__ = ["exact_duplicate_groups"]


def exact_duplicate_groups(X: sp.spmatrix | sp.sparray) -> IntArray:
    """Label every row with the lowest index of the rows identical to it.

    Parameters
    ----------
    X : sparse matrix, shape (n_rows, n_cols)
        Weighted document vectors (e.g. TF-IDF rows). Rows are compared after
        conversion to canonical CSR (sorted indices, duplicates summed, explicit
        zeros removed), so two rows are identical when they have the same columns
        with bit-identical values. All-zero rows are identical to each other.

    Returns
    -------
    IntArray, shape (n_rows,)
        ``labels[i]`` is the representative of row i: the smallest index j with
        row j equal to row i (so ``labels[i] == i`` for representatives and
        ``labels[i] < i`` for copies).

    Notes
    -----
    Each row's column indices and value bytes are hashed with BLAKE2b (64-bit
    digest), which is deterministic across processes and platforms of the same
    byte order, unlike Python's salted ``hash``. Rows that share a digest are then
    compared exactly, so a hash collision cannot merge different documents.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> X = sp.csr_matrix(np.array([[1.0, 0], [0, 1.0], [1.0, 0], [0, 1.0], [0.5, 0.5]]))
    >>> exact_duplicate_groups(X).tolist()
    [0, 1, 0, 1, 4]
    """
    if not sp.issparse(X):
        raise ValueError(f"X must be a scipy sparse matrix, got {type(X).__name__}")
    if X.ndim != 2:
        raise ValueError(f"X must be 2-D, got shape {X.shape}")
    csr = sp.csr_matrix(X, copy=True)
    csr.sum_duplicates()
    csr.eliminate_zeros()
    indptr, indices = csr.indptr, csr.indices.astype(np.int64)
    data = np.ascontiguousarray(csr.data)
    n = csr.shape[0]
    digests = np.empty(n, dtype=np.uint64)
    for i in range(n):
        lo, hi = indptr[i], indptr[i + 1]
        h = hashlib.blake2b(indices[lo:hi].tobytes(), digest_size=8)
        h.update(data[lo:hi].tobytes())
        digests[i] = int.from_bytes(h.digest(), "little")
    labels = np.arange(n, dtype=np.int64)
    # Stable sort: within a digest, rows stay in index order, so the first row of
    # each exact-equality class met is its lowest index.
    order = np.argsort(digests, kind="stable")
    bounds = np.flatnonzero(np.diff(digests[order])) + 1
    for group in np.split(order, bounds):
        if group.size < 2:
            continue
        reps: list[int] = []
        for i in group:
            row_i = (indices[indptr[i] : indptr[i + 1]], data[indptr[i] : indptr[i + 1]])
            for r in reps:
                row_r = (indices[indptr[r] : indptr[r + 1]], data[indptr[r] : indptr[r + 1]])
                if np.array_equal(row_i[0], row_r[0]) and np.array_equal(row_i[1], row_r[1]):
                    labels[i] = r
                    break
            else:
                reps.append(int(i))
    return labels
